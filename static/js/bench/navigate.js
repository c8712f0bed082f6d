// bench/navigate.js: choosing nodes and words: parent, child and sibling moves, reading
// order, word ranges.

import * as T from "../treemodel.js";
import {render} from "./draw.js";
import {S} from "./state.js";

export function select(ref) {
  S.sel = ref;
  S.range = null;
  S.rangeAnchor = S.rangeHead = null;
  render();
}

// children refs of each phrase, parent of each node; rebuilt from the tree on demand
export function structure() {
  const kids = [];
  const tagParent = [];
  let word = 0;
  let idx = 0;
  (function walk(node, parent) {
    if (T.isPreterminal(node)) {
      tagParent[word] = parent;
      if (parent >= 0) kids[parent].push({kind: "tag", index: word});
      word++;
      return;
    }
    const me = idx++;
    kids[me] = [];
    if (parent >= 0) kids[parent].push({kind: "phrase", index: me});
    for (const c of node.children) walk(c, me);
  })(S.tree, -1);
  return {kids, tagParent};
}

export function parentOf(ref, st) {
  if (ref.kind === "tag") return {kind: "phrase", index: st.tagParent[ref.index]};
  const p = S.spans[ref.index].parent;
  return p >= 0 ? {kind: "phrase", index: p} : null;
}

export function move(dir) {
  if (!S.sel) { select({kind: "phrase", index: 0}); return; }
  const st = structure();
  const ref = S.sel;
  let next = null;
  if (dir === "up") next = parentOf(ref, st);
  else if (dir === "down") next = ref.kind === "phrase" ? st.kids[ref.index][0] : null;
  else if (ref.kind === "tag") {
    const i = ref.index + (dir === "left" ? -1 : 1);
    if (i >= 0 && i < S.tokens.length) next = {kind: "tag", index: i};
  } else {
    const parent = parentOf(ref, st);
    if (parent) {
      const sibs = st.kids[parent.index];
      const at = sibs.findIndex((r) => r.kind === ref.kind && r.index === ref.index);
      next = sibs[at + (dir === "left" ? -1 : 1)] || null;
    }
  }
  if (next) select(next);
}

// pre-order walk over phrases and tags: j / k
export function order() {
  const out = [];
  let word = 0;
  let idx = 0;
  (function walk(node) {
    if (T.isPreterminal(node)) { out.push({kind: "tag", index: word++}); return; }
    out.push({kind: "phrase", index: idx++});
    node.children.forEach(walk);
  })(S.tree);
  return out;
}

export function step(delta, filter = () => true) {
  const all = order();
  const at = S.sel ? all.findIndex((r) => r.kind === S.sel.kind && r.index === S.sel.index) : -1;
  for (let k = 1; k <= all.length; k++) {
    const r = all[(at + delta * k + all.length * k) % all.length];
    if (filter(r)) { select(r); return true; }
  }
  return false;
}

export function extendRange(delta) {
  if (S.rangeAnchor === null) {
    if (S.sel && S.sel.kind === "phrase") {
      const s = S.spans[S.sel.index];
      S.rangeAnchor = s.start;
      S.rangeHead = s.end - 1;
    } else if (S.sel) {
      S.rangeAnchor = S.rangeHead = S.sel.index;
    } else {
      S.rangeAnchor = S.rangeHead = 0;
      delta = 0;
    }
  }
  S.rangeHead = Math.min(S.tokens.length - 1, Math.max(0, S.rangeHead + delta));
  S.range = [Math.min(S.rangeAnchor, S.rangeHead), Math.max(S.rangeAnchor, S.rangeHead) + 1];
  render();
}
