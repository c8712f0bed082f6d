// treeview.js: lay out and draw a constituency tree as SVG (top-down, words in order along
// the bottom, no crossing lines). Used by the Bench and reusable by any page.
//
// Usage:
//   import {drawTree} from "/static/js/treeview.js";
//   const view = drawTree(container, tree, {
//     marks: (ref) => null | {classes: ["my-class"], dots: 0|1|2, pinned: bool, title: "..."},
//     selected: {kind: "phrase", index: 3} | {kind: "tag", index: 5} | null,
//     range: [start, end] | null,       // highlighted words, end exclusive
//     zoom: 1,                          // 1 = natural size; the container should scroll
//     wordText: (word) => display text, // default: -LRB-/-RRB- shown as ( )
//     onSelect: (ref, event) => {},     // click on a constituent label or a POS tag
//     onActivate: (ref, event) => {},   // double-click on one
//     onRange: (start, end, done) => {},// drag across words; done=false while dragging (the
//                                       // view repaints the range itself: do not redraw then)
//     wordMarks: (i) => null | {classes: [...], title: "..."}, // marks on word i
//     collapsed: Set of phrase indices drawn folded: the label on the tag row over a
//                summary of its words (first … last, and how many), its subtree hidden
//     dropTargets: (ref) => [phrase index, ...], // where a dragged node may go
//     onDrop: (ref, phraseIndex) => {}, // a node dragged onto a phrase (offered or not)
//   });
//   view.svg; view.width; view.height; view.box(ref) -> {x, y, w, h}; view.reveal(ref)
//
// `tree` is a treemodel.js tree ({label, children} / {label, word}). A ref names a node:
// {kind: "phrase", index} with index into treemodel.spansOf(tree) (pre-order, root = 0), or
// {kind: "tag", index} with the word's position. Marks are drawn with classes the page styles
// (tw-node, tw-phrase, tw-tag, tw-selected, plus the mark's own classes); `dots` adds one or
// two small circles at the label's top-right corner; `pinned` adds a nail bar at its left.
// Every text is set with textContent, never parsed as markup.
// The drawn tree's one-line bracketed text is put on svg.dataset.tree (tests read it).
//
// Layout: each word gets a column as wide as its word or tag; a phrasal node sits at the mean
// of its first and last child and on the row of its height (POS tags on row 1), so a parent is
// always above its children and sibling subtrees occupy disjoint columns: lines never cross.
// Cost: linear in the number of nodes; a 60-word tree draws in a few milliseconds.

import {isPreterminal, spansOf, writeTree} from "./treemodel.js";

const SVG_NS = "http://www.w3.org/2000/svg";
const LABEL_FONT = "600 13px \"DejaVu Sans\", system-ui, sans-serif";
const WORD_FONT = "14px \"DejaVu Sans\", system-ui, sans-serif";
const ROW = 44;        // vertical distance between rows of labels
const BOX_H = 20;      // label box height
const BOX_PAD = 7;     // horizontal padding inside a label box
const COL_GAP = 16;    // space between word columns
const MARGIN = 18;
const WORD_GAP = 30;   // from the POS tag row down to the words

let measureCtx = null;

function textWidth(text, font) {
  if (!measureCtx) measureCtx = document.createElement("canvas").getContext("2d");
  measureCtx.font = font;
  return measureCtx.measureText(text).width;
}

function el(name, attrs = {}, parent = null) {
  const node = document.createElementNS(SVG_NS, name);
  for (const [k, v] of Object.entries(attrs)) node.setAttribute(k, String(v));
  if (parent) parent.appendChild(node);
  return node;
}

export function defaultWordText(word) {
  return word.replace(/-LRB-/g, "(").replace(/-RRB-/g, ")");
}

// The words of a folded phrase in one short line.
function summary(tags, first, last, wordText) {
  const n = last - first + 1;
  if (n <= 2) return tags.slice(first, last + 1).map((t) => wordText(t.word)).join(" ");
  return `${wordText(tags[first].word)} … ${wordText(tags[last].word)} (${n} words)`;
}

// Positions of every node; pure arithmetic apart from text measuring. Nodes inside a folded
// phrase are `hidden`; their words share the folded phrase's column.
export function layoutTree(tree, wordText = defaultWordText, collapsed = null) {
  const tags = [];
  const phrases = [];
  const blocks = new Map();   // first word of a folded phrase -> {phrase, first, last}
  let height = 1;
  (function walk(node, hidden) {
    if (isPreterminal(node)) {
      tags.push({label: node.label, word: node.word, index: tags.length, hidden});
      return {h: 1, kind: "tag", index: tags.length - 1};
    }
    const me = {label: node.label, index: phrases.length, kids: [], hidden};
    phrases.push(me);
    me.collapsed = !hidden && !!collapsed && collapsed.has(me.index);
    const first = tags.length;
    let h = 1;
    for (const c of node.children) {
      const r = walk(c, hidden || me.collapsed);
      me.kids.push(r);
      h = Math.max(h, r.h + 1);
    }
    me.h = me.collapsed ? 1 : h;
    if (me.collapsed) blocks.set(first, {phrase: me, first, last: tags.length - 1});
    if (!hidden) height = Math.max(height, me.h);
    return {h: me.h, kind: "phrase", index: me.index};
  })(tree, false);
  let x = MARGIN;
  for (let i = 0; i < tags.length; i++) {
    const block = blocks.get(i);
    if (block) {
      const p = block.phrase;
      p.summary = summary(tags, block.first, block.last, wordText);
      p.w = textWidth(`${p.label} ▸`, LABEL_FONT) + 2 * BOX_PAD;
      const col = Math.max(textWidth(p.summary, WORD_FONT), p.w) + COL_GAP;
      for (let k = block.first; k <= block.last; k++) {
        Object.assign(tags[k], {left: x, right: x + col, x: x + col / 2, w: 0});
      }
      p.x = x + col / 2;
      x += col;
      i = block.last;
      continue;
    }
    const t = tags[i];
    const ww = textWidth(wordText(t.word), WORD_FONT);
    const tw = textWidth(t.label, LABEL_FONT) + 2 * BOX_PAD;
    const col = Math.max(ww, tw) + COL_GAP;
    t.left = x;
    t.right = x + col;
    t.x = x + col / 2;
    t.w = tw;
    x += col;
  }
  const rowY = (h) => MARGIN + (height - h) * ROW;
  for (const t of tags) t.y = rowY(1);
  const wordY = rowY(1) + BOX_H / 2 + WORD_GAP;
  // children are fully placed before their parent: walk phrases from the last (deepest) up
  const xOf = (r) => (r.kind === "tag" ? tags[r.index].x : phrases[r.index].x);
  for (let k = phrases.length - 1; k >= 0; k--) {
    const p = phrases[k];
    p.y = rowY(p.h);
    if (p.collapsed) continue;
    p.x = (xOf(p.kids[0]) + xOf(p.kids[p.kids.length - 1])) / 2;
    p.w = textWidth(p.label || "\u00a0", LABEL_FONT) + 2 * BOX_PAD;
  }
  return {tags, phrases, width: x + MARGIN, height: wordY + 24, wordY};
}

export function drawTree(container, tree, options = {}) {
  const opts = {marks: () => null, selected: null, range: null, zoom: 1,
    wordText: defaultWordText, onSelect: null, onActivate: null, onRange: null,
    wordMarks: () => null, dropTargets: null, onDrop: null, collapsed: null, ...options};
  const L = layoutTree(tree, opts.wordText, opts.collapsed);
  const spans = spansOf(tree);
  const svg = el("svg", {
    class: "tw-tree", viewBox: `0 0 ${L.width} ${L.height}`,
    width: Math.round(L.width * opts.zoom), height: Math.round(L.height * opts.zoom),
    role: "img", "aria-label": "constituency tree",
  });
  svg.dataset.tree = writeTree(tree);
  const gBands = el("g", {class: "tw-bands"}, svg);
  const gEdges = el("g", {class: "tw-edges"}, svg);
  const gNodes = el("g", {class: "tw-nodes"}, svg);
  const gWords = el("g", {class: "tw-words"}, svg);

  const sel = opts.selected;
  const isSel = (kind, index) => sel && sel.kind === kind && sel.index === index;
  const colLeft = (i) => L.tags[i].left + COL_GAP / 4;
  const colRight = (i) => L.tags[i].right - COL_GAP / 4;

  // span bands under the words: the selected node's words, the chosen range
  if (sel) {
    const [a, b] = sel.kind === "phrase" ? [spans[sel.index].start, spans[sel.index].end]
      : [sel.index, sel.index + 1];
    el("rect", {class: "tw-band tw-band-selected", x: colLeft(a), y: L.wordY - 17,
      width: colRight(b - 1) - colLeft(a), height: 26, rx: 4}, gBands);
  }
  const rangeBand = el("rect", {class: "tw-band tw-band-range", y: L.wordY + 11, height: 5,
    rx: 2}, gBands);
  // connectors: a stem below the parent, a bar across its children, a drop to each child
  const top = (r) => (r.kind === "tag" ? L.tags[r.index] : L.phrases[r.index]);
  for (const p of L.phrases) {
    if (p.hidden) continue;
    if (p.collapsed) {
      el("path", {d: `M${p.x} ${p.y + BOX_H / 2}V${L.wordY - 14}`,
        class: "tw-edge tw-edge-word"}, gEdges);
      continue;
    }
    const barY = p.y + BOX_H / 2 + 8;
    const first = top(p.kids[0]);
    const last = top(p.kids[p.kids.length - 1]);
    let d = `M${p.x} ${p.y + BOX_H / 2}V${barY}`;
    if (p.kids.length > 1) d += `M${first.x} ${barY}H${last.x}`;
    for (const r of p.kids) {
      const c = top(r);
      d += `M${c.x} ${barY}V${c.y - BOX_H / 2}`;
    }
    el("path", {d, class: "tw-edge"}, gEdges);
  }
  for (const t of L.tags) {
    if (t.hidden) continue;
    el("path", {d: `M${t.x} ${t.y + BOX_H / 2}V${L.wordY - 14}`, class: "tw-edge tw-edge-word"},
      gEdges);
  }

  const boxes = new Map();
  const drawBox = (kind, index, item, label) => {
    const ref = {kind, index};
    const mark = opts.marks(ref) || {};
    const classes = ["tw-node", kind === "tag" ? "tw-tag" : "tw-phrase",
      ...(mark.classes || [])];
    if (mark.pinned) classes.push("tw-pinned");
    if (isSel(kind, index)) classes.push("tw-selected");
    if (item.collapsed) classes.push("tw-collapsed");
    const g = el("g", {class: classes.join(" "), "data-kind": kind, "data-index": index}, gNodes);
    const x = item.x - item.w / 2;
    const y = item.y - BOX_H / 2;
    el("rect", {class: "tw-box", x, y, width: item.w, height: BOX_H, rx: 5}, g);
    if (mark.pinned) el("rect", {class: "tw-nail", x: x + 1.5, y: y + 3, width: 3.5,
      height: BOX_H - 6, rx: 1}, g);
    const text = el("text", {class: "tw-label", x: item.x + (mark.pinned ? 2 : 0),
      y: item.y + 4.5, "text-anchor": "middle"}, g);
    text.textContent = label;
    for (let k = 0; k < (mark.dots || 0); k++) {
      el("circle", {class: "tw-dot", cx: x + item.w - 3 - k * 7, cy: y - 4, r: 2.6}, g);
    }
    const title = el("title", {}, g);
    title.textContent = mark.title || label;
    boxes.set(`${kind}:${index}`, {x, y, w: item.w, h: BOX_H});
    g.addEventListener("click", (ev) => {
      if (svg.dataset.dragged) { delete svg.dataset.dragged; return; }
      if (opts.onSelect) opts.onSelect(ref, ev);
    });
    g.addEventListener("dblclick", (ev) => opts.onActivate && opts.onActivate(ref, ev));
  };
  for (const p of L.phrases) {
    if (!p.hidden) drawBox("phrase", p.index, p, p.collapsed ? `${p.label} ▸` : p.label);
  }
  for (const t of L.tags) if (!t.hidden) drawBox("tag", t.index, t, t.label);

  for (const p of L.phrases) {
    if (!p.collapsed) continue;
    const text = el("text", {class: "tw-word-text tw-summary", x: p.x, y: L.wordY,
      "text-anchor": "middle"}, gWords);
    text.textContent = p.summary;
  }
  for (const t of L.tags) {
    if (t.hidden) continue;
    const wm = opts.wordMarks(t.index) || {};
    const g = el("g", {class: ["tw-word", ...(wm.classes || [])].join(" "),
      "data-index": t.index}, gWords);
    if (wm.title) el("title", {}, g).textContent = wm.title;
    el("rect", {class: "tw-word-hit", x: t.left, y: L.wordY - 18, width: t.right - t.left,
      height: 30}, g);
    const text = el("text", {class: "tw-word-text", x: t.x, y: L.wordY,
      "text-anchor": "middle"}, g);
    text.textContent = opts.wordText(t.word);
  }
  // the word range is repainted in place while dragging (a redraw would lose the drag)
  const paintRange = (range) => {
    rangeBand.setAttribute("visibility", range ? "visible" : "hidden");
    if (range) {
      rangeBand.setAttribute("x", colLeft(range[0]));
      rangeBand.setAttribute("width", colRight(range[1] - 1) - colLeft(range[0]));
    }
    for (const g of gWords.querySelectorAll("g.tw-word")) {
      const i = Number(g.getAttribute("data-index"));
      g.classList.toggle("tw-in-range", !!range && i >= range[0] && i < range[1]);
    }
  };
  paintRange(opts.range);

  // dragging across the words picks a range; the column under the pointer decides
  if (opts.onRange) {
    const wordAt = (ev) => {
      const pt = svg.createSVGPoint();
      pt.x = ev.clientX;
      pt.y = ev.clientY;
      const m = svg.getScreenCTM();
      const p = m ? pt.matrixTransform(m.inverse()) : pt;
      let lo = 0;
      let hi = L.tags.length - 1;
      while (lo < hi) {
        const mid = (lo + hi) >> 1;
        if (L.tags[mid].right < p.x) lo = mid + 1; else hi = mid;
      }
      return lo;
    };
    let anchor = null;
    gWords.addEventListener("pointerdown", (ev) => {
      if (ev.button !== 0) return;
      ev.preventDefault();
      anchor = wordAt(ev);
      svg.setPointerCapture(ev.pointerId);
      paintRange([anchor, anchor + 1]);
      opts.onRange(anchor, anchor + 1, false);
    });
    svg.addEventListener("pointermove", (ev) => {
      if (anchor === null) return;
      const i = wordAt(ev);
      paintRange([Math.min(anchor, i), Math.max(anchor, i) + 1]);
      opts.onRange(Math.min(anchor, i), Math.max(anchor, i) + 1, false);
    });
    const finish = (ev) => {
      if (anchor === null) return;
      const i = wordAt(ev);
      const a = anchor;
      anchor = null;
      opts.onRange(Math.min(a, i), Math.max(a, i) + 1, true);
    };
    svg.addEventListener("pointerup", finish);
    svg.addEventListener("pointercancel", () => { anchor = null; });
  }

  if (opts.onDrop) dragNodes(svg, gNodes, opts);

  container.replaceChildren(svg);
  const box = (ref) => boxes.get(`${ref.kind}:${ref.index}`) || null;
  return {
    svg, width: L.width, height: L.height, box,
    // scroll the container so that a node is visible
    reveal(ref) {
      let b = box(ref);
      if (!b) return;
      // a POS tag is shown with its word: keep both on screen
      if (ref.kind === "tag") {
        const t = L.tags[ref.index];
        b = {x: t.left, w: t.right - t.left, y: b.y, h: L.wordY + 8 - b.y};
      }
      const z = opts.zoom;
      const left = b.x * z - container.clientWidth / 2 + (b.w * z) / 2;
      const topY = b.y * z - container.clientHeight / 2;
      const needX = b.x * z < container.scrollLeft ||
        (b.x + b.w) * z > container.scrollLeft + container.clientWidth;
      const needY = b.y * z < container.scrollTop ||
        (b.y + b.h) * z > container.scrollTop + container.clientHeight;
      if (needX) container.scrollLeft = Math.max(0, left);
      if (needY) container.scrollTop = Math.max(0, topY);
    },
  };
}

// Dragging a label onto a phrase: the phrases it may go to are marked (tw-drop-ok) while it
// moves, the one under the pointer too (tw-drop-here); a drag shorter than 6 px is a click.
function dragNodes(svg, gNodes, opts) {
  let from = null;
  let start = null;
  let marked = [];
  const nodeAt = (ev) => {
    const hit = document.elementFromPoint(ev.clientX, ev.clientY);
    const g = hit && hit.closest && hit.closest("g.tw-phrase");
    return g && svg.contains(g) ? Number(g.getAttribute("data-index")) : null;
  };
  const clear = () => {
    for (const g of marked) g.classList.remove("tw-drop-ok", "tw-drop-here");
    marked = [];
    svg.classList.remove("tw-dragging");
  };
  gNodes.addEventListener("pointerdown", (ev) => {
    const g = ev.target.closest("g.tw-node");
    if (!g || ev.button !== 0) return;
    from = {kind: g.getAttribute("data-kind"), index: Number(g.getAttribute("data-index"))};
    start = [ev.clientX, ev.clientY];
  });
  svg.addEventListener("pointermove", (ev) => {
    if (!from) return;
    if (!svg.classList.contains("tw-dragging")) {
      if (Math.hypot(ev.clientX - start[0], ev.clientY - start[1]) < 6) return;
      svg.classList.add("tw-dragging");
      svg.setPointerCapture(ev.pointerId);
      for (const k of opts.dropTargets ? opts.dropTargets(from) : []) {
        const g = gNodes.querySelector(`g.tw-phrase[data-index="${k}"]`);
        if (g) { g.classList.add("tw-drop-ok"); marked.push(g); }
      }
    }
    const here = nodeAt(ev);
    for (const g of marked) {
      g.classList.toggle("tw-drop-here", Number(g.getAttribute("data-index")) === here);
    }
  });
  svg.addEventListener("pointerup", (ev) => {
    const dragging = from && svg.classList.contains("tw-dragging");
    const ref = from;
    from = null;
    if (!dragging) return;
    const target = nodeAt(ev);
    clear();
    svg.dataset.dragged = "1";
    setTimeout(() => { delete svg.dataset.dragged; }, 0);
    if (target !== null && !(ref.kind === "phrase" && ref.index === target)) opts.onDrop(ref, target);
  });
  svg.addEventListener("pointercancel", () => { from = null; clear(); });
}
