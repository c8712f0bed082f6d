// bench/draw.js: the tree drawn with its marks (doubt dots, pins, the chosen node), and how
// probabilities are written.

import * as T from "../treemodel.js";
import {defaultWordText, drawTree} from "../treeview.js";
import {cmd} from "./commands.js";
import {select} from "./navigate.js";
import {say} from "./status.js";
import {isEdited, isRetagged} from "./loop.js";
import {renderReadings, renderSide, renderText} from "./side.js";
import {$, S, UNSURE, WEAK, root} from "./state.js";

// "word 8" or "words 8–10" (1-based, ends included) for the words start..end-1.
export function wordsLabel(start, end) {
  return end - start === 1 ? `word ${start + 1}` : `words ${start + 1}–${end}`;
}

// The words as written (a bracket, not its escape): for reading, not for trees.
export function spanWords(start, end) {
  return S.tokens.slice(start, end).map(defaultWordText).join(" ");
}

export function posteriorOf(s) {
  if (!S.data.suggestion || !S.data.suggestion.complete) return null;
  return S.posteriors.get(`${T.stripLabel(s.label)} ${s.start} ${s.end}`) ?? 0;
}

export function marks(ref) {
  const carried = S.carry && S.carry.ref.kind === ref.kind && S.carry.ref.index === ref.index;
  const out = marksOf(ref);
  if (carried) out.classes = [...(out.classes || []), "tw-carried"];
  return out;
}

// Doubt marks show the grammar's belief about what the annotator has not touched: a pinned,
// added or relabelled constituent, or a pinned or corrected tag, is theirs and has none.
function doubt(out, p) {
  if (p === null) return;
  if (p < WEAK) { out.classes.push("tw-weak"); out.dots = 2; } else if (p < UNSURE) {
    out.classes.push("tw-unsure"); out.dots = 1;
  }
}

export function tagPosteriorOf(i) {
  const per = S.tagPosteriors[i];
  if (!per) return null;
  return per[T.tagsOf(S.tree)[i]] ?? 0;
}

function marksOf(ref) {
  if (ref.kind === "tag") {
    const pinned = T.isTagPinned(S.pins, ref.index);
    const yours = pinned || isRetagged(ref.index);
    const out = {pinned, classes: yours ? ["tw-yours"] : [], dots: 0};
    const p = yours ? null : tagPosteriorOf(ref.index);
    doubt(out, p);
    out.title = `${T.tagsOf(S.tree)[ref.index]} (POS tag of word ${ref.index + 1})` +
      (p !== null ? ` · grammar: ${formatP(p)}` : "") +
      (pinned ? " · pinned" : yours ? " · yours" : "");
    return out;
  }
  const s = S.spans[ref.index];
  const pinned = T.isSpanPinned(S.pins, s);
  const yours = pinned || isEdited(s);
  const p = ref.index === 0 || yours ? null : posteriorOf(s);
  const out = {pinned, classes: [`tw-fam-${familyOf(s.label)}`], dots: 0};
  if (S.carry && S.carry.targets.has(ref.index)) out.classes.push("tw-drop-ok");
  let title = `${s.label} · ${wordsLabel(s.start, s.end)}`;
  if (p !== null) title += ` · grammar: ${formatP(p)}`;
  doubt(out, p);
  if (yours) out.classes.push("tw-yours");
  if (pinned) title += " · pinned";
  else if (yours) title += " · yours";
  out.title = title;
  return out;
}

// A reading's probability: tiny ones in scientific notation rather than all "under 0.1%".
export function formatProbability(p) {
  if (p >= 0.001) return formatP(p);
  if (p <= 0) return "0";
  const exp = Math.floor(Math.log10(p));
  const sup = String(exp).replace(/-/g, "⁻").replace(/\d/g, (d) => "⁰¹²³⁴⁵⁶⁷⁸⁹"[Number(d)]);
  return `${(p / 10 ** exp).toFixed(1)}·10${sup}`;
}

export function formatP(p) {
  if (p < 0.001) return "under 0.1%";
  return `${(p * 100).toFixed(p < 0.1 ? 1 : 0)}%`;
}

// Phrase families for reading a tree at a glance (the colour and corner shape are in
// bench.css; the legend explains them; f or the legend's switch turns them off).
const FAMILIES = {
  noun: ["NP", "NML", "NX", "WHNP", "QP"],
  verb: ["VP"],
  clause: ["S", "SBAR", "SBARQ", "SINV", "SQ", "RRC"],
  modifier: ["ADJP", "ADVP", "PP", "WHADJP", "WHADVP", "WHPP", "PRT"],
};
const FAMILY_OF = new Map(Object.entries(FAMILIES).flatMap(([f, ls]) => ls.map((l) => [l, f])));

export function familyOf(label) {
  return FAMILY_OF.get(T.stripLabel(label)) || "other";
}

// The family colours are on unless switched off; the choice is kept in this browser.
const FAMILIES_KEY = "treewright-families";

export function readFamiliesChoice() {
  try { return localStorage.getItem(FAMILIES_KEY) !== "off"; } catch { return true; }
}

export function familiesShown() {
  return !$("tree-pane").classList.contains("families-off");
}

export function showFamilies(on) {
  $("tree-pane").classList.toggle("families-off", !on);
  const btn = root.querySelector('[data-cmd="families"]');
  if (btn) btn.setAttribute("aria-pressed", on ? "true" : "false");
  try { localStorage.setItem(FAMILIES_KEY, on ? "on" : "off"); } catch { /* not kept */ }
}

function wordMarks(i) {
  if (!S.unseen.has(i)) return null;
  return {classes: ["tw-unseen"], title: `“${S.tokens[i]}” was not in the grammar's training ` +
    "trees: its tag is a guess from its spelling"};
}

// The phrases a node can be moved under without changing the order of the words.
export function moveTargets(ref) {
  return T.reattachTargets(S.tree, ref, (s) => T.isSpanPinned(S.pins, s));
}

const spanKey = (s) => `${s.label} ${s.start} ${s.end}`;

// Folded phrases by index; a chosen node inside a folded phrase unfolds it, so that what is
// chosen is always drawn.
function foldedIndices() {
  if (!S.folded.size) return null;
  const out = new Set();
  S.spans.forEach((s, k) => { if (k > 0 && S.folded.has(spanKey(s))) out.add(k); });
  if (S.sel) {
    const [a, b] = S.sel.kind === "phrase" ? [S.spans[S.sel.index].start,
      S.spans[S.sel.index].end] : [S.sel.index, S.sel.index + 1];
    for (const k of [...out]) {
      const s = S.spans[k];
      const inside = s.start <= a && b <= s.end && !(S.sel.kind === "phrase" && S.sel.index === k);
      if (inside && (S.sel.kind === "tag" || isAbove(k, S.sel.index))) {
        out.delete(k);
        S.folded.delete(spanKey(s));
      }
    }
  }
  return out;
}

function isAbove(k, index) {
  for (let p = S.spans[index].parent; p >= 0; p = S.spans[p].parent) if (p === k) return true;
  return false;
}

// z: fold or unfold the chosen phrase (a view change, not an edit: nothing is saved).
export function toggleFold() {
  if (!S.sel || S.sel.kind !== "phrase" || S.sel.index === 0) {
    say("Choose a constituent below the root to fold.", "warn");
    return;
  }
  const k = spanKey(S.spans[S.sel.index]);
  if (S.folded.has(k)) S.folded.delete(k); else S.folded.add(k);
  render();
}

// The overview: the whole tree small above the pane, the part on screen framed; a click
// there scrolls the pane to that place. Shown only when the tree is wider than the pane.
function renderOverview() {
  const box = $("overview");
  const pane = $("tree-pane");
  const wide = S.view.width * S.zoom > pane.clientWidth + 2;
  box.hidden = !wide;
  if (!wide) { box.replaceChildren(); return; }
  const svg = S.view.svg.cloneNode(true);
  svg.removeAttribute("width");
  svg.removeAttribute("height");
  svg.removeAttribute("role");
  svg.setAttribute("aria-hidden", "true");
  svg.setAttribute("preserveAspectRatio", "xMinYMid meet");
  svg.classList.add("tw-overview");
  delete svg.dataset.tree;
  const frame = document.createElementNS("http://www.w3.org/2000/svg", "rect");
  frame.setAttribute("class", "tw-viewport");
  svg.appendChild(frame);
  box.replaceChildren(svg);
  markViewport();
}

export function markViewport() {
  const frame = $("overview").querySelector("rect.tw-viewport");
  if (!frame) return;
  const pane = $("tree-pane");
  const z = S.zoom;
  frame.setAttribute("x", pane.scrollLeft / z);
  frame.setAttribute("y", pane.scrollTop / z);
  frame.setAttribute("width", Math.min(S.view.width, pane.clientWidth / z));
  frame.setAttribute("height", Math.min(S.view.height, pane.clientHeight / z));
}

export function overviewJump(ev) {
  const svg = $("overview").querySelector("svg");
  if (!svg) return;
  const pt = svg.createSVGPoint();
  pt.x = ev.clientX;
  pt.y = ev.clientY;
  const p = pt.matrixTransform(svg.getScreenCTM().inverse());
  const pane = $("tree-pane");
  pane.scrollLeft = Math.max(0, p.x * S.zoom - pane.clientWidth / 2);
  pane.scrollTop = Math.max(0, p.y * S.zoom - pane.clientHeight / 2);
  markViewport();
}

export function render() {
  S.view = drawTree($("tree-pane"), S.tree, {
    marks, wordMarks, selected: S.sel, range: S.range, zoom: S.zoom,
    collapsed: foldedIndices(),
    onSelect: (ref) => { select(ref); },
    onActivate: (ref) => { select(ref); cmd.relabel(); },
    onRange: (a, b, done) => {
      if (!done) return;
      S.range = [a, b];
      S.rangeAnchor = a;
      S.rangeHead = b - 1;
      S.sel = null;
      $("tree-pane").focus({preventScroll: true});
      render();
    },
    dropTargets: (ref) => (S.editable && !S.conflict ? moveTargets(ref) : []),
    onDrop: (ref, target) => { cmd.reattach(ref, target); },
  });
  if (S.sel) S.view.reveal(S.sel);
  renderOverview();
  renderSide();
  renderText();
  renderReadings();
}
