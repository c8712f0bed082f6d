// bench/commands.js: every edit the annotator can make, guarded (read only, conflict) and
// ending in commit(); also notes, leaving the page and zoom.

import * as T from "../treemodel.js";
import {api, errorText} from "./api.js";
import {askLabel, confirmBox} from "./dialogs.js";
import {moveTargets, render, spanWords, wordsLabel} from "./draw.js";
import {commit, flush, tally, markDirty, setTree, showConflict, snapshot, unknownIn} from "./saving.js";
import {ask, showOffer, showReading, take, takeInside} from "./loop.js";
import {renderSide} from "./side.js";
import {$, S, root, sentenceId} from "./state.js";
import {say, setStatus} from "./status.js";
import {applyTokenFix, openTokens} from "./tokens.js";

export function guard(fn) {
  return async (...args) => {
    if (!S.editable || S.conflict) {
      say(S.conflict ? "Settle the conflict first." : "This annotation is read only.", "warn");
      return;
    }
    try {
      say("");
      await fn(...args);
    } catch (err) {
      if (err instanceof T.EditError || err instanceof T.BracketError) say(err.message, "warn");
      else throw err;
    }
  };
}

// Undo and redo: take the newest state of `from`, keeping the current one on `to`.
export function travel(from, to, what) {
  if (!from.length) throw new T.EditError(`nothing to ${what}`);
  if (from[from.length - 1].fix) {
    const entry = from.pop();
    // a refused fix (say a conflict) leaves the step where it was
    applyTokenFix(entry.fix, what).then((done) => { if (!done) from.push(entry); });
    return;
  }
  to.push(snapshot());
  tally(what);
  const state = from.pop();
  setTree(state.tree, state.pins);
  S.offer = null;  // an offer was made for the tree left behind
  showOffer(false);
  S.sel = state.sel;
  S.range = null;
  markDirty("edit");
  render();
}

export function requireUnpinnedPhrase() {
  if (!S.sel || S.sel.kind !== "phrase") throw new T.EditError("choose a constituent first");
  if (S.sel.index === 0) throw new T.EditError("the root stays as it is");
  const s = S.spans[S.sel.index];
  if (T.isSpanPinned(S.pins, s)) throw new T.EditError(`${s.label} is pinned: unpin it first (p)`);
  return s;
}

// Replace the tree by one the grammar offered, keeping the pins it still has.
export function startFrom(text, what) {
  const tree = T.readTree(text);
  const kept = T.pinsKept(S.pins, tree);
  commit(tree, kept.pins, "alternative", {kind: "phrase", index: 0});
  say(`Started from ${what}.` +
    (kept.dropped ? ` ${kept.dropped} pins not in it were released.` : ""));
}

export const cmd = {
  tokens: guard(async () => openTokens()),
  // move a node with its subtree under another phrase (dragged there, or put down with m)
  reattach: guard(async (ref, target) => {
    const goal = S.spans[target];
    const out = T.reattach(S.tree, ref, target, (s) => T.isSpanPinned(S.pins, s));
    S.carry = null;
    commit(out.tree, S.pins, "edit", out.ref, "move");
    say(`Moved under ${goal.label} (${wordsLabel(goal.start, goal.end)} before the move).`);
  }),
  // m: take the chosen node; walk to the new parent; m or Enter puts it down there
  carry: guard(async () => {
    if (S.carry) {
      const {ref} = S.carry;
      if (!S.sel || S.sel.kind !== "phrase") {
        throw new T.EditError("walk to a constituent to put it under (arrows), or Esc");
      }
      await cmd.reattach(ref, S.sel.index);   // a refusal says why and keeps it taken
      return;
    }
    if (!S.sel) throw new T.EditError("choose the constituent or word to move first");
    if (S.sel.kind === "phrase" && S.sel.index === 0) {
      throw new T.EditError("the root stays where it is");
    }
    const targets = moveTargets(S.sel);
    if (!targets.length) {
      throw new T.EditError("it can go nowhere else without changing the order of the words");
    }
    S.carry = {ref: S.sel, targets: new Set(targets)};
    render();
    say(`Taken: walk to the new parent (arrows; ${targets.length} marked), m or Enter ` +
      "puts it down, Esc leaves it.");
  }),
  add: guard(async (pinned = false) => {
    let start;
    let end;
    if (S.range) [start, end] = S.range;
    else if (S.sel && S.sel.kind === "phrase") ({start, end} = S.spans[S.sel.index]);
    else if (S.sel) [start, end] = [S.sel.index, S.sel.index + 1];
    else throw new T.EditError("choose words first: drag across them or use Shift+arrows");
    const label = await askLabel(
      `New ${pinned ? "pinned " : ""}constituent over “${spanWords(start, end)}”`, "",
      S.labels, "label");
    if (!label) return;
    const out = T.addConstituent(S.tree, start, end, label);
    const pins = pinned ? T.toggleSpanPin(S.pins, T.spansOf(out.tree)[out.index]) : S.pins;
    commit(out.tree, pins, "edit", {kind: "phrase", index: out.index}, "add");
  }),
  // one action: add a bracket over the chosen words and pin it (A)
  addPin: guard(async () => cmd.add(true)),
  relabel: guard(async () => {
    if (!S.sel) throw new T.EditError("choose a constituent or a POS tag first");
    if (S.sel.kind === "tag") {
      const i = S.sel.index;
      if (T.isTagPinned(S.pins, i)) throw new T.EditError("this tag is pinned: unpin it first (p)");
      const tag = await askLabel(`POS tag of “${S.tokens[i]}”`, T.tagsOf(S.tree)[i], S.tags, "tag");
      if (!tag) return;
      commit(T.setTag(S.tree, i, tag), S.pins, "edit", {kind: "tag", index: i}, "retag");
      return;
    }
    const s = S.spans[S.sel.index];
    if (T.isSpanPinned(S.pins, s)) throw new T.EditError(`${s.label} is pinned: unpin it first (p)`);
    const label = await askLabel(`Relabel ${s.label} over “${spanWords(s.start, s.end)}”`,
      s.label, S.labels, "label");
    if (!label || label === s.label) return;
    commit(T.relabel(S.tree, S.sel.index, label), S.pins, "edit", S.sel, "relabel");
  }),
  dissolve: guard(async () => {
    requireUnpinnedPhrase();
    const parent = S.spans[S.sel.index].parent;
    commit(T.removeConstituent(S.tree, S.sel.index), S.pins, "edit",
      {kind: "phrase", index: parent}, "remove");
  }),
  edge: guard(async (edge, delta) => {
    requireUnpinnedPhrase();
    const out = T.moveEdge(S.tree, S.sel.index, edge, delta);
    commit(out.tree, S.pins, "edit", {kind: "phrase", index: out.index}, "edge");
  }),
  pin: guard(async () => {
    if (!S.sel) throw new T.EditError("choose a constituent or a POS tag to pin");
    const pins = S.sel.kind === "tag"
      ? T.toggleTagPin(S.pins, S.sel.index, T.tagsOf(S.tree)[S.sel.index])
      : T.toggleSpanPin(S.pins, S.spans[S.sel.index]);
    commit(S.tree, pins, "edit", S.sel, "pin");
  }),
  regrow: guard(async () => {
    if (!S.data.suggestion) throw new T.EditError("no grammar yet: nothing to re-parse with");
    if (S.offer) { take(); return; }
    const btn = root.querySelector('[data-cmd="regrow"]');
    btn.classList.add("busy");
    say("Re-parsing around everything you said…");
    try {
      await ask(true);
    } finally {
      btn.classList.remove("busy");
    }
  }),
  takeInside: guard(async () => {
    takeInside();
  }),
  nextOffered: guard(async () => {
    if (!showReading()) throw new T.EditError("no re-parse is offered now: edit, or ask with g");
  }),
  reading: guard(async (i) => {
    const alt = S.data.suggestion && S.data.suggestion.alternatives[i];
    if (alt) startFrom(alt.tree, `reading ${i + 1}`);
  }),
  consensus: guard(async () => {
    const text = S.data.suggestion && S.data.suggestion.consensus;
    if (text) startFrom(text, "the consensus");
  }),
  undo: guard(async () => travel(S.undo, S.redo, "undo")),
  redo: guard(async () => travel(S.redo, S.undo, "redo")),
  applyText: guard(async () => {
    const area = $("tree-text");
    const err = $("text-error");
    let tree;
    try {
      tree = T.readTree(area.value);
    } catch (e) {
      if (!(e instanceof T.BracketError)) throw e;
      showTextError(`Line ${e.line}, column ${e.column}: ${e.reason}`, e.line, e.column);
      return;
    }
    if (T.isPreterminal(tree)) {
      showTextError("The tree needs a constituent above the POS tags.", 1, 1);
      return;
    }
    const mm = T.wordMismatch(tree, S.tokens);
    if (mm) {
      showTextError(`Words differ from the sentence: ${T.describeMismatch(mm, S.tokens.length)}.`);
      return;
    }
    const unknown = unknownIn(tree).filter((l) => !S.confirmed.has(l));
    if (unknown.length) {
      if (S.data.unknown_label_policy === "refuse") {
        showTextError(`Not in this corpus's label or tag set: ${unknown.join(", ")}.`);
        return;
      }
      const ok = await confirmBox(`Not in this corpus's label or tag set: ${unknown.join(", ")}. ` +
        "Use them anyway?", "Use them", "Cancel");
      if (!ok) return;
      unknown.forEach((l) => S.confirmed.add(l));
    }
    err.hidden = true;
    S.textEditing = false;
    const kept = T.pinsKept(S.pins, tree);
    commit(tree, kept.pins, "text", {kind: "phrase", index: 0});
    $("tree-pane").focus({preventScroll: true});
    say("Text applied." + (kept.dropped ? ` ${kept.dropped} pins not in it were released.` : ""));
  }),
  handIn: guard(async () => {
    const ok = await confirmBox("Hand in this tree? It cannot be changed afterwards.",
      "Hand in", "Keep working");
    if (!ok) return;
    if (!S.head && !S.dirty) markDirty(S.data.source === "flat" ? "flat" : "suggestion");
    if (!(await flush())) { say("The tree is not saved yet, so it was not handed in.", "warn"); return; }
    const r = await api("POST", `/api/bench/${sentenceId}/submit`, {base: S.head});
    if (r.status === 200) {
      S.data.annotation = r.body;
      S.editable = false;
      setStatus("readonly", "handed in");
      say("Handed in. Press n for the next sentence.");
      $("queue-submitted").textContent = String(S.data.queue.submitted + 1);
      render();
    } else if (r.status === 409) {
      showConflict(r.body);
    } else {
      say(`Not handed in: ${errorText(r.body)}`, "warn");
    }
  }),
  hold: guard(async () => {
    const reason = $("hold-reason").value;
    if (!reason) { say("Choose a reason to hold the sentence back.", "warn"); return; }
    // wrong tokens can be fixed right here: offer that first
    if (reason === "tokenization wrong" && await confirmBox("The tokens can be fixed here: " +
        "split, join or respell a word (t), and your tree is carried over. Fix them now " +
        "instead of holding the sentence back?", "Fix the tokens", "Hold back anyway")) {
      openTokens();
      return;
    }
    const r = await api("PATCH", `/api/bench/${sentenceId}/note`,
      {flag: reason, comment: $("note-text").value});
    if (r.status === 200) { S.data.annotation = r.body; say(`Held back: ${reason}.`); }
    else say(`Not held back: ${errorText(r.body)}`, "warn");
    renderSide();
  }),
  release: guard(async () => {
    const r = await api("PATCH", `/api/bench/${sentenceId}/note`, {clear_flag: true});
    if (r.status === 200) { S.data.annotation = r.body; say("Released: back to draft."); }
    renderSide();
  }),
};

export async function saveNote() {
  const r = await api("PATCH", `/api/bench/${sentenceId}/note`, {comment: $("note-text").value});
  if (r.status === 200) { S.data.annotation = r.body; say("Note saved."); }
  else say(`Note not saved: ${errorText(r.body)}`, "warn");
}

export function showTextError(message, line, column) {
  const err = $("text-error");
  err.textContent = message;
  err.hidden = false;
  const area = $("tree-text");
  if (line) {
    const lines = area.value.split("\n");
    let offset = 0;
    for (let k = 0; k < line - 1 && k < lines.length; k++) offset += lines[k].length + 1;
    offset += (column || 1) - 1;
    area.focus();
    area.setSelectionRange(offset, Math.min(area.value.length, offset + 1));
  }
}

export async function go(id) {
  if (!id) { say("No sentence there.", "warn"); return; }
  if (S.editable && !(await flush())) {
    say("Not leaving: the last change is not saved yet.", "warn");
    return;
  }
  window.location.href = `/bench/${id}`;
}

export function setZoom(z) {
  S.zoom = Math.min(3, Math.max(0.1, z));
  $("zoom-level").textContent = `${Math.round(S.zoom * 100)}%`;
  render();
}

// The smallest drawn size of a label or word the fit keeps (px on screen).
export const LEGIBLE_PX = 11;

// The zoom below which some label or word of the drawn tree would be smaller than LEGIBLE_PX.
function legibleZoom() {
  let smallest = Infinity;
  for (const sel of ["text.tw-label", "text.tw-word-text"]) {
    const el = $("tree-pane").querySelector(sel);
    if (el) smallest = Math.min(smallest, parseFloat(getComputedStyle(el).fontSize));
  }
  // rounded up to the whole percent the zoom shows, so the drawn size is never under
  return Number.isFinite(smallest) && smallest > 0
    ? Math.ceil((LEGIBLE_PX / smallest) * 100) / 100 : 0;
}

// w: the whole width of the tree in the pane, as far as the labels stay legible (LEGIBLE_PX);
// a tree wider than that is fitted at the smallest legible zoom and the rest scrolls (the
// overview shows where).
export function fitWidth() {
  const pane = $("tree-pane");
  if (!S.view) return;
  const whole = (pane.clientWidth - 8) / S.view.width;
  const floor = legibleZoom();
  if (whole >= floor) {
    setZoom(whole);
    return;
  }
  setZoom(floor);
  const shown = Math.round(Math.min(1, (pane.clientWidth - 8) / (S.view.width * S.zoom)) * 100);
  say(`The whole width would need ${Math.round(whole * 100)}%, too small to read; ` +
    `at ${Math.round(S.zoom * 100)}% the labels stay legible and ${shown}% of the width ` +
    "fits: scroll or click the overview for the rest.");
}

// A deep tree starts zoomed out so that its words are on screen (never below 55%).
export function fitHeight() {
  const pane = $("tree-pane");
  const room = parseFloat(getComputedStyle(pane).maxHeight) - 12;
  if (S.view && S.view.height > room && room > 0) setZoom(Math.max(0.55, room / S.view.height));
}
