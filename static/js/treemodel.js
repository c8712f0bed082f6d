// treemodel.js: pure tree operations for the Bench (no DOM).
//
// A tree is plain data:
//   phrasal node:  {label: "NP", children: [node, ...]}
//   preterminal:   {label: "NN", word: "engine"}        (the label is the POS tag)
// Spans are word indices [start, end), 0-based, end exclusive, as on the server.
//
// Reading follows the server's reader (parser/trees.py): one tree, any whitespace, an empty
// label only on the outermost bracket; errors are BracketError with 1-based line and column
// of the offending token. Writing gives the server's one-line form, so a tree read from a
// saved revision and written back is byte-identical.
//
// Every edit goes through the node list of spansOf() and treeFromSpans(): an edit changes the
// list, the rebuild checks that the spans still nest, and a failure is an EditError saying
// which constituent would be crossed. Edits never mutate their input.

export class BracketError extends Error {
  constructor(message, line, column) {
    super(`line ${line}, column ${column}: ${message}`);
    this.name = "BracketError";
    this.reason = message;
    this.line = line;
    this.column = column;
  }
}

export class EditError extends Error {
  constructor(message) {
    super(message);
    this.name = "EditError";
  }
}

const LABEL_RE = /^[^\s()]+$/;

export function isPreterminal(node) {
  return typeof node.word === "string";
}

export function validLabel(label) {
  return typeof label === "string" && LABEL_RE.test(label);
}

// ---------------------------------------------------------------------------- reading

function lineCol(text, offset) {
  let line = 1;
  let start = 0;
  for (let i = 0; i < offset; i++) {
    if (text.charCodeAt(i) === 10) { line++; start = i + 1; }
  }
  return [line, offset - start + 1];
}

function fail(text, offset, message) {
  const [line, column] = lineCol(text, offset);
  throw new BracketError(message, line, column);
}

const SPACE = /\s/;

export function readTree(text) {
  const stack = []; // {label, children, word, at, wordAt}
  let tree = null;
  let i = 0;
  const n = text.length;
  while (i < n) {
    const ch = text[i];
    if (SPACE.test(ch)) { i++; continue; }
    if (tree !== null) fail(text, i, "text after the tree: only one tree was wanted");
    if (ch === "(") {
      const at = i;
      i++;
      while (i < n && SPACE.test(text[i])) i++;
      let j = i;
      while (j < n && !SPACE.test(text[j]) && text[j] !== "(" && text[j] !== ")") j++;
      const label = text.slice(i, j);
      i = j;
      if (label === "") {
        let k = i;
        while (k < n && SPACE.test(text[k])) k++;
        if (k < n && text[k] === ")") fail(text, k, "empty brackets ( )");
        if (stack.length > 0) fail(text, at, "a bracket without a label inside a tree");
      }
      const top = stack[stack.length - 1];
      if (top && top.word !== null) {
        fail(text, top.wordAt, `the word '${top.word}' stands beside a subtree`);
      }
      stack.push({label, children: [], word: null, at, wordAt: -1});
    } else if (ch === ")") {
      if (stack.length === 0) fail(text, i, "a ')' with no open bracket");
      const node = stack.pop();
      if (node.word === null && node.children.length === 0) {
        fail(text, i, `(${node.label} ) has no children`);
      }
      const built = node.word !== null ? {label: node.label, word: node.word}
        : {label: node.label, children: node.children};
      if (node.word !== null && node.label === "") {
        fail(text, node.at, "a word needs a POS tag before it");
      }
      i++;
      if (stack.length === 0) tree = built;
      else stack[stack.length - 1].children.push(built);
    } else {
      const at = i;
      let j = i;
      while (j < n && !SPACE.test(text[j]) && text[j] !== "(" && text[j] !== ")") j++;
      const word = text.slice(i, j);
      i = j;
      const top = stack[stack.length - 1];
      if (!top) fail(text, at, `the word '${word}' stands outside any tree`);
      if (top.children.length > 0) fail(text, at, `the word '${word}' stands beside a subtree`);
      if (top.word !== null) fail(text, at, `a second word '${word}' in (${top.label} ...)`);
      top.word = word;
      top.wordAt = at;
    }
  }
  if (stack.length > 0) {
    const [line, column] = lineCol(text, stack[0].at);
    fail(text, n, `end of text with a bracket still open (the tree at line ${line}, ` +
      `column ${column} is not closed)`);
  }
  if (tree === null) fail(text, n, "no tree in the text");
  return tree;
}

// ---------------------------------------------------------------------------- writing

export function escapeWord(word) {
  return word.replace(/\(/g, "-LRB-").replace(/\)/g, "-RRB-");
}

export function writeTree(node) {
  if (isPreterminal(node)) return `(${node.label} ${escapeWord(node.word)})`;
  return `(${node.label} ${node.children.map(writeTree).join(" ")})`;
}

// Indented: a node that fits in `width` columns stays on one line, otherwise each child goes
// on its own line two spaces deeper.
export function writeTreeIndented(node, width = 70, indent = 0) {
  const flat = writeTree(node);
  if (isPreterminal(node) || indent + flat.length <= width) return flat;
  const pad = " ".repeat(indent + 2);
  const kids = node.children.map((c) => pad + writeTreeIndented(c, width, indent + 2));
  return `(${node.label}\n${kids.join("\n")})`;
}

// ---------------------------------------------------------------------------- looking

function preterminals(tree) {
  const out = [];
  (function walk(node) {
    if (isPreterminal(node)) out.push(node);
    else node.children.forEach(walk);
  })(tree);
  return out;
}

export function wordsOf(tree) {
  return preterminals(tree).map((p) => p.word);
}

export function tagsOf(tree) {
  return preterminals(tree).map((p) => p.label);
}

// Phrasal nodes in pre-order (a parent before its children, the root first), each
// {label, start, end, depth, parent (index or -1)}; the index in this list is a node's id.
export function spansOf(tree) {
  const out = [];
  let pos = 0;
  (function walk(node, depth, parent) {
    if (isPreterminal(node)) { pos++; return; }
    const me = out.length;
    out.push({label: node.label, start: pos, end: pos, depth, parent});
    for (const c of node.children) walk(c, depth + 1, me);
    out[me].end = pos;
  })(tree, 0, -1);
  return out;
}

// Compare a tree's words with the sentence's tokens: null when equal, else where they differ.
export function wordMismatch(tree, tokens) {
  const got = wordsOf(tree);
  const m = Math.max(got.length, tokens.length);
  for (let i = 0; i < m; i++) {
    if (got[i] !== tokens[i]) {
      return {position: i, expected: tokens[i] ?? null, found: got[i] ?? null};
    }
  }
  return null;
}

export function describeMismatch(mm, total) {
  if (mm.found === null) {
    return `the tree ends after word ${mm.position} but the sentence goes on with ` +
      `'${mm.expected}'`;
  }
  if (mm.expected === null) {
    return `word ${mm.position + 1} '${mm.found}' is extra: the sentence has ${total} words`;
  }
  return `word ${mm.position + 1} is '${mm.found}' but the sentence has '${mm.expected}' there`;
}

// Function tags and indices off: "NP-SBJ-1" -> "NP"; "-LRB-" and "" stay whole.
export function stripLabel(label) {
  if (!label || label[0] === "-") return label;
  for (let i = 1; i < label.length; i++) {
    if (label[i] === "-" || label[i] === "=") return label.slice(0, i);
  }
  return label;
}

// ---------------------------------------------------------------------------- building

function spanText(s) {
  return s.end - s.start === 1 ? `${s.label} (word ${s.start + 1})`
    : `${s.label} (words ${s.start + 1}-${s.end})`;
}

// Build the tree whose phrasal nodes are exactly `spans` ({label, start, end}); the first
// span covering every word is the root; equal spans form a unary chain, earlier on top.
export function treeFromSpans(words, tags, spans) {
  const n = words.length;
  const order = spans.map((s, k) => k)
    .sort((a, b) => spans[a].start - spans[b].start || spans[b].end - spans[a].end || a - b);
  if (order.length === 0 || spans[order[0]].start !== 0 || spans[order[0]].end !== n) {
    throw new EditError("one constituent must cover the whole sentence");
  }
  for (const s of spans) {
    if (!(s.start >= 0 && s.start < s.end && s.end <= n)) {
      throw new EditError(`${spanText(s)} is empty or outside the sentence`);
    }
  }
  const stack = [];
  let position = 0;
  let root = null;
  const fill = (kids, limit) => {
    while (position < limit) {
      kids.push({label: tags[position], word: words[position]});
      position++;
    }
  };
  const closeTop = () => {
    const top = stack.pop();
    fill(top.children, top.end);
    const node = {label: top.label, children: top.children};
    if (stack.length) stack[stack.length - 1].children.push(node);
    else root = node;
  };
  for (const k of order) {
    const s = spans[k];
    while (stack.length && stack[stack.length - 1].end <= s.start) closeTop();
    if (stack.length) {
      const parent = stack[stack.length - 1];
      if (s.end > parent.end) {
        throw new EditError(`${spanText(s)} would cross ${spanText(parent)}`);
      }
      fill(parent.children, s.start);
    } else if (root !== null || k !== order[0]) {
      throw new EditError(`${spanText(s)} lies outside the root`);
    }
    stack.push({label: s.label, start: s.start, end: s.end, children: []});
  }
  while (stack.length) closeTop();
  return root;
}

function rebuild(tree, spans) {
  return treeFromSpans(wordsOf(tree), tagsOf(tree), spans);
}

function plain(spans) {
  return spans.map((s) => ({label: s.label, start: s.start, end: s.end}));
}

// ---------------------------------------------------------------------------- edits

export function crossingSpan(spans, start, end) {
  return spans.find((s) => (s.start < start && start < s.end && s.end < end) ||
    (start < s.start && s.start < end && end < s.end)) || null;
}

// A new constituent `label` over [start, end). Over the same words as an existing one it goes
// directly above it (below the root when it covers the whole sentence).
export function addConstituent(tree, start, end, label) {
  if (!validLabel(label)) throw new EditError(`'${label}' is not a usable label`);
  const spans = plain(spansOf(tree));
  const n = wordsOf(tree).length;
  if (!(start >= 0 && start < end && end <= n)) {
    throw new EditError("choose one or more words first");
  }
  if (spans.some((s) => s.start === start && s.end === end && s.label === label)) {
    throw new EditError(`there is already ${label} over these words`);
  }
  const cross = crossingSpan(spans, start, end);
  if (cross) throw new EditError(`${label} here would cross ${spanText(cross)}`);
  let at = spans.findIndex((s) => s.start === start && s.end === end);
  if (at === -1) at = spans.length;
  at = Math.max(at, 1);
  spans.splice(at, 0, {label, start, end});
  const result = rebuild(tree, spans);
  return {tree: result, index: spansOf(result).findIndex((s) => s.start === start &&
    s.end === end && s.label === label)};
}

// Remove phrasal node `index`: its children move up into its parent.
export function removeConstituent(tree, index) {
  const spans = plain(spansOf(tree));
  if (index <= 0 || index >= spans.length) throw new EditError("the root cannot be removed");
  spans.splice(index, 1);
  return rebuild(tree, spans);
}

export function relabel(tree, index, label) {
  if (!validLabel(label)) throw new EditError(`'${label}' is not a usable label`);
  const spans = plain(spansOf(tree));
  if (index < 0 || index >= spans.length) throw new EditError("no such constituent");
  spans[index].label = label;
  return rebuild(tree, spans);
}

// Move one edge ("start" or "end") of node `index` by delta (-1 or +1) words.
export function moveEdge(tree, index, edge, delta) {
  const spans = plain(spansOf(tree));
  if (index <= 0 || index >= spans.length) throw new EditError("the root's edges are fixed");
  const n = wordsOf(tree).length;
  const s = {...spans[index]};
  s[edge] += delta;
  if (s.start < 0 || s.end > n) throw new EditError("that edge is already at the sentence's end");
  if (s.start >= s.end) throw new EditError(`${spans[index].label} cannot get shorter than one word`);
  if (spans.some((o, k) => k !== index && o.start === s.start && o.end === s.end &&
      o.label === s.label)) {
    throw new EditError(`there is already ${s.label} over those words`);
  }
  const others = spans.filter((_, k) => k !== index);
  const cross = crossingSpan(others, s.start, s.end);
  if (cross) throw new EditError(`${s.label} would cross ${spanText(cross)}`);
  spans[index] = s;
  const result = rebuild(tree, spans);
  const idx = spansOf(result).findIndex((o) => o.start === s.start && o.end === s.end &&
    o.label === s.label);
  return {tree: result, index: idx};
}

export function setTag(tree, wordIndex, tag) {
  if (!validLabel(tag)) throw new EditError(`'${tag}' is not a usable POS tag`);
  const tags = tagsOf(tree);
  if (wordIndex < 0 || wordIndex >= tags.length) throw new EditError("no such word");
  tags[wordIndex] = tag;
  return treeFromSpans(wordsOf(tree), tags, plain(spansOf(tree)));
}

// ---------------------------------------------------------------------------- pins

// Pins: {spans: [[start, end, label], ...], tags: [[wordIndex, tag], ...]}.
export function emptyPins() {
  return {spans: [], tags: []};
}

export function isSpanPinned(pins, s) {
  return pins.spans.some((p) => p[0] === s.start && p[1] === s.end && p[2] === s.label);
}

export function isTagPinned(pins, i) {
  return pins.tags.some((p) => p[0] === i);
}

export function toggleSpanPin(pins, s) {
  const spans = isSpanPinned(pins, s)
    ? pins.spans.filter((p) => !(p[0] === s.start && p[1] === s.end && p[2] === s.label))
    : [...pins.spans, [s.start, s.end, s.label]];
  return {...pins, spans};
}

export function toggleTagPin(pins, i, tag) {
  const tags = isTagPinned(pins, i) ? pins.tags.filter((p) => p[0] !== i)
    : [...pins.tags, [i, tag]];
  return {...pins, tags};
}

// `tree` with what `reading` (same words) has inside phrase `index` of `tree`: the reading's
// phrases strictly inside that node's words and the tags of those words. The node itself (and
// any unary chain over the same words) and everything outside it stay as they are. The result
// is always a valid tree: nothing outside the node crosses its words, so nothing the reading
// puts inside them can cross anything kept.
export function graftInside(tree, reading, index) {
  const spans = plain(spansOf(tree));
  if (index < 0 || index >= spans.length) throw new EditError("choose a constituent first");
  const words = wordsOf(tree);
  const other = wordsOf(reading);
  if (other.length !== words.length || other.some((w, i) => w !== words[i])) {
    throw new EditError("the reading has other words than the tree");
  }
  const {start, end} = spans[index];
  const inside = (s) => start <= s.start && s.end <= end && !(s.start === start && s.end === end);
  const tags = tagsOf(tree);
  const theirs = tagsOf(reading);
  for (let i = start; i < end; i++) tags[i] = theirs[i];
  const kept = spans.filter((s) => !inside(s));
  return treeFromSpans(words, tags, kept.concat(plain(spansOf(reading)).filter(inside)));
}

// The pins that still hold in `tree`, and how many were dropped.
export function pinsKept(pins, tree) {
  const spans = spansOf(tree);
  const tags = tagsOf(tree);
  const keepSpans = pins.spans.filter((p) => spans.some((s) => s.start === p[0] &&
    s.end === p[1] && s.label === p[2]));
  const keepTags = pins.tags.filter((p) => tags[p[0]] === p[1]);
  return {
    pins: {...pins, spans: keepSpans, tags: keepTags},
    dropped: pins.spans.length - keepSpans.length + pins.tags.length - keepTags.length,
  };
}

// Brackets (label, start, end) in one tree and not in the other: a quick measure of how far
// an alternative reading is from the current tree.
export function bracketDifference(a, b) {
  const key = (s) => `${s.label} ${s.start} ${s.end}`;
  const sa = new Set(spansOf(a).map(key));
  const sb = new Set(spansOf(b).map(key));
  let d = 0;
  for (const k of sa) if (!sb.has(k)) d++;
  for (const k of sb) if (!sa.has(k)) d++;
  const ta = tagsOf(a);
  const tb = tagsOf(b);
  for (let i = 0; i < ta.length; i++) if (ta[i] !== tb[i]) d++;
  return d;
}

// ---------------------------------------------------------------------------- reattaching

// Move a node with its whole subtree under another phrase, keeping the words in order.
// `ref` is {kind: "phrase"|"tag", index}; `target` a phrase index. Possible only when the
// words stay in order: the target is an ancestor whose path down to the node runs along one
// edge of the node (the path's nodes give the node up), or the target's words end just before
// the node's (or start just after), so the target and the path from it up to the common
// ancestor stretch over the node. Nothing else changes: the node keeps its span and its
// subtree, and no other phrase gains or loses a child. Throws an EditError saying why a move
// is refused; `pinned(span)` tells whether a phrase whose words would change is pinned.
export function reattach(tree, ref, target, pinned = () => false) {
  const spans = spansOf(tree);
  const n = wordsOf(tree).length;
  if (target < 0 || target >= spans.length) throw new EditError("no such constituent");
  let a;
  let b;
  let parent;
  let self = -1;
  if (ref.kind === "tag") {
    [a, b] = [ref.index, ref.index + 1];
    if (a < 0 || a >= n) throw new EditError("no such word");
    parent = spans.reduce((best, s, k) => (s.start <= a && b <= s.end ? k : best), 0);
  } else {
    self = ref.index;
    if (self <= 0 || self >= spans.length) throw new EditError("the root stays where it is");
    ({start: a, end: b, parent} = spans[self]);
  }
  const what = ref.kind === "tag" ? `the word ${a + 1}` : spanText(spans[self]);
  const goal = spans[target];
  if (target === parent) throw new EditError(`${what} is already under ${spanText(goal)}`);
  if (target === self) throw new EditError(`${what} cannot go under itself`);
  if (self >= 0 && isInside(spans, target, self)) {
    throw new EditError(`${spanText(goal)} is inside ${what}: it cannot hold it`);
  }
  const ancestors = (k) => {
    const out = [];
    for (; k >= 0; k = spans[k].parent) out.push(k);
    return out;
  };
  const up = ancestors(parent);               // the node's old parent and its ancestors
  const changed = new Map();                   // phrase index -> new [start, end]
  if (up.includes(target)) {
    // moving up: every phrase between the target and the node gives the node's words up
    for (const k of up.slice(0, up.indexOf(target))) {
      const s = spans[k];
      if (s.start === a && s.end === b) {
        throw new EditError(`${what} is all of ${spanText(s)}: move ${s.label} instead`);
      }
      if (s.start !== a && s.end !== b) {
        throw new EditError(`${what} is in the middle of ${spanText(s)}: taking it out ` +
          "would change the order of the words");
      }
      changed.set(k, s.start === a ? [b, s.end] : [s.start, a]);
    }
  } else {
    if (goal.end !== a && goal.start !== b) {
      throw new EditError(`${spanText(goal)} does not reach up to ${what}: a move keeps the ` +
        "words in order, so only a phrase ending just before it or starting just after it, " +
        "or one above it, can take it");
    }
    const over = ancestors(target);
    const common = over.find((k) => up.includes(k));
    for (const k of up.slice(0, up.indexOf(common))) {
      const s = spans[k];
      if (s.start === a && s.end === b) {
        throw new EditError(`${what} is all of ${spanText(s)}: move ${s.label} instead`);
      }
      changed.set(k, s.start === a ? [b, s.end] : [s.start, a]);
    }
    for (const k of over.slice(0, over.indexOf(common))) {
      const s = spans[k];
      changed.set(k, [Math.min(s.start, a), Math.max(s.end, b)]);
    }
  }
  for (const k of changed.keys()) {
    if (pinned(spans[k])) throw new EditError(`${spanText(spans[k])} is pinned: unpin it first`);
  }
  const next = plain(spans);
  for (const [k, [s, e]] of changed) { next[k].start = s; next[k].end = e; }
  const result = treeFromSpans(wordsOf(tree), tagsOf(tree), next);
  if (ref.kind === "tag") return {tree: result, ref: {kind: "tag", index: a}};
  const [ts, te] = changed.get(target) || [goal.start, goal.end];
  const after = spansOf(result);
  const idx = after.findIndex((s, k) => k > 0 && s.start === a && s.end === b &&
    s.label === spans[self].label && after[s.parent].start === ts &&
    after[s.parent].end === te && after[s.parent].label === goal.label);
  return {tree: result, ref: {kind: "phrase", index: idx}};
}

// Is phrase k inside phrase `anc` (a proper descendant)?
function isInside(spans, k, anc) {
  for (let p = spans[k].parent; p >= 0; p = spans[p].parent) if (p === anc) return true;
  return false;
}

// Every phrase `ref` could be moved under (for offering only the moves that keep the order).
export function reattachTargets(tree, ref, pinned = () => false) {
  const out = [];
  const spans = spansOf(tree);
  for (let k = 0; k < spans.length; k++) {
    try { reattach(tree, ref, k, pinned); out.push(k); } catch (e) {
      if (!(e instanceof EditError)) throw e;
    }
  }
  return out;
}
