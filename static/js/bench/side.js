// bench/side.js: the side panel and the text panel: what is chosen, which buttons apply, pins,
// hold state, the readings list and the bracketed text.

import * as T from "../treemodel.js";
import {cmd} from "./commands.js";
import {formatP, formatProbability, posteriorOf, spanWords, wordsLabel} from "./draw.js";
import {$, S, root} from "./state.js";

export function renderSide() {
  const info = $("selection-info");
  if (S.range) {
    const label = wordsLabel(...S.range);
    info.textContent = `${label[0].toUpperCase()}${label.slice(1)}: ${spanWords(...S.range)}`;
  } else if (S.sel && S.sel.kind === "phrase") {
    const s = S.spans[S.sel.index];
    const p = S.sel.index === 0 ? null : posteriorOf(s);
    info.textContent = `${s.label} · ${wordsLabel(s.start, s.end)}: ${spanWords(s.start, s.end)}` +
      (p !== null ? ` · grammar: ${formatP(p)}` : "") +
      (T.isSpanPinned(S.pins, s) ? " · pinned" : "");
  } else if (S.sel) {
    const i = S.sel.index;
    info.textContent = `${T.tagsOf(S.tree)[i]} · word ${i + 1}: ${S.tokens[i]}` +
      (T.isTagPinned(S.pins, i) ? " · pinned" : "");
  } else {
    info.textContent = "Nothing chosen: click a label, drag across words, or press an arrow key.";
  }
  const ed = S.editable && !S.conflict;
  const phrase = S.sel && S.sel.kind === "phrase";
  const enable = {
    add: ed && (S.range || S.sel), relabel: ed && S.sel, dissolve: ed && phrase && S.sel.index > 0,
    "edge-start-out": ed && phrase && S.sel.index > 0, "edge-start-in": ed && phrase && S.sel.index > 0,
    "edge-end-in": ed && phrase && S.sel.index > 0, "edge-end-out": ed && phrase && S.sel.index > 0,
    pin: ed && S.sel, carry: ed && S.sel && !(phrase && S.sel.index === 0), regrow: ed && !!S.data.suggestion,
    "take-inside": ed && phrase && Boolean(S.offer), undo: ed && S.undo.length > 0,
    redo: ed && S.redo.length > 0, handin: ed, "apply-text": ed,
  };
  for (const btn of root.querySelectorAll("[data-cmd]")) {
    const name = btn.dataset.cmd;
    if (name in enable) btn.disabled = !enable[name];
  }
  const nSpans = S.pins.spans.length;
  const nTags = S.pins.tags.length;
  $("pin-count").textContent = `Pinned: ${nSpans} ${nSpans === 1 ? "constituent" : "constituents"}, ` +
    `${nTags} ${nTags === 1 ? "tag" : "tags"}`;
  const a = S.data.annotation;
  $("hold-state").textContent = a.state === "flagged" ? `Held back: ${a.flag}` : "";
  $("hold-release").hidden = a.state !== "flagged";
  $("hold-go").disabled = !S.editable;
  $("hold-release").disabled = !S.editable;
}

export function renderText() {
  if (S.textEditing) return;
  $("tree-text").value = T.writeTreeIndented(S.tree);
  $("text-error").hidden = true;
}

export function renderReadings() {
  const list = $("readings");
  list.replaceChildren();
  const sugg = S.data.suggestion;
  if (!sugg) {
    const li = document.createElement("li");
    li.className = "muted";
    li.textContent = "No grammar yet: nothing to offer.";
    list.appendChild(li);
    return;
  }
  if (sugg.stale) {
    const li = document.createElement("li");
    li.className = "muted readings-stale";
    li.textContent = `From grammar version ${sugg.grammar_version}, no longer the active one.`;
    list.appendChild(li);
  }
  if (sugg.consensus) {
    addReading(list, sugg.consensus, "Consensus", "reading consensus",
      "The brackets most probable over all the grammar's readings.\n" + sugg.consensus,
      () => cmd.consensus());
  }
  sugg.alternatives.forEach((alt, i) => {
    const prob = alt.probability !== null ? formatProbability(alt.probability)
      : sugg.complete ? "no probability (fallback)" : "probability coming…";
    const btn = addReading(list, alt.tree, `${i + 1}. ${prob}`, "reading", alt.tree,
      () => cmd.reading(i));
    btn.dataset.reading = String(i);
  });
}

// One button of the readings list: its name, then how far its tree is from the one on screen.
export function addReading(list, text, name, className, title, onClick) {
  const li = document.createElement("li");
  const btn = document.createElement("button");
  btn.type = "button";
  btn.className = className;
  let tree = null;
  try { tree = T.readTree(text); } catch { tree = null; }
  const diff = tree ? T.bracketDifference(tree, S.tree) : null;
  btn.textContent = name + (diff === null ? "" : diff === 0 ? " · same as yours"
    : ` · ${diff} ${diff === 1 ? "difference" : "differences"} from yours`);
  btn.title = title;
  btn.disabled = !S.editable;
  btn.addEventListener("click", onClick);
  li.appendChild(btn);
  list.appendChild(li);
  return btn;
}
