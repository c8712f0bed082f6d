// The Search page: draw each result's tree (static/js/treeview.js) with the matching spans
// marked: the constituents whose span is a match get the class sr-match, and the first
// match's words the highlighted range. Without script the words stay marked in the text.

import {drawTree} from "./treeview.js";
import {readTree, spansOf} from "./treemodel.js";

for (const hit of document.querySelectorAll(".sr-hit[data-tree]")) {
  const container = hit.querySelector(".sr-drawing");
  if (!container || !hit.dataset.tree) continue;
  let tree;
  let spans;
  try {
    tree = readTree(hit.dataset.tree);
    spans = JSON.parse(hit.dataset.spans);
  } catch (err) {
    continue; // the text above still shows the match
  }
  const wanted = new Set(spans.map(([s, e]) => `${s}:${e}`));
  const phrases = spansOf(tree);
  drawTree(container, tree, {
    range: spans.length ? spans[0] : null,
    marks: (ref) => {
      if (ref.kind === "phrase") {
        const p = phrases[ref.index];
        return wanted.has(`${p.start}:${p.end}`) ? {classes: ["sr-match"]} : null;
      }
      return wanted.has(`${ref.index}:${ref.index + 1}`) ? {classes: ["sr-match"]} : null;
    },
  });
}
