// bench/tokens.js: fixing the tokens. The chosen word is respelt, split in two (a space in
// what is typed) or joined with the next word; the server keeps the old tokens as a version,
// carries the tree over and saves it, with the page's active time and edit counts since its
// last save (the fix itself is counted there, when it is made); the page then opens again on
// the new tokens, with the fix that takes this one back on the undo stack (and, after an undo,
// the fix that makes it again on the redo stack).

import {api, errorText} from "./api.js";
import {flush, markDirty} from "./saving.js";
import {$, S, sentenceId, undoKey} from "./state.js";
import {say} from "./status.js";

let at = 0;

function chosenWord() {
  if (S.range) return S.range[0];
  if (S.sel && S.sel.kind === "tag") return S.sel.index;
  if (S.sel && S.sel.kind === "phrase") return S.spans[S.sel.index].start;
  return 0;
}

function show(i) {
  at = Math.max(0, Math.min(S.tokens.length - 1, i));
  const ctx = $("tokens-context");
  ctx.replaceChildren();
  const from = Math.max(0, at - 4);
  const to = Math.min(S.tokens.length, at + 5);
  if (from > 0) ctx.append("… ");
  for (let k = from; k < to; k++) {
    if (k === at) {
      const m = document.createElement("mark");
      m.textContent = S.tokens[k];
      ctx.append(m);
    } else ctx.append(S.tokens[k]);
    if (k < to - 1) ctx.append(" ");
  }
  if (to < S.tokens.length) ctx.append(" …");
  $("tokens-number").textContent = String(at + 1);
  $("tokens-input").value = S.tokens[at];
  $("tokens-msg").textContent = "";
  $("tokens-join").disabled = at >= S.tokens.length - 1;
  $("tokens-join").textContent = at < S.tokens.length - 1
    ? `Join with the next word (“${S.tokens[at + 1]}”)` : "Join with the next word";
}

function close() {
  $("tokens").hidden = true;
  S.modal = null;
  $("tree-pane").focus({preventScroll: true});
}

export function openTokens(word = chosenWord()) {
  if (!S.editable || S.conflict) {
    say(S.conflict ? "Settle the conflict first." : "This annotation is read only.", "warn");
    return;
  }
  S.modal = "tokens";
  $("tokens").hidden = false;
  show(word);
  $("tokens-input").focus();
  $("tokens-input").select();
}

// Send a fix; on success the page opens again on the new tokens. `mode`: "new" (a fix the
// annotator asked for: its inverse goes on the undo stack and the redo stack empties), "undo"
// (the fix takes an earlier one back: the fix that makes it again goes on the redo stack) or
// "redo" (it makes an undone fix again: its inverse goes back on the undo stack).
export async function applyTokenFix(change, mode = "new") {
  if (!S.head && !S.dirty) markDirty(S.data.source === "flat" ? "flat" : "suggestion");
  if (!(await flush())) { say("The tree is not saved yet, so the tokens were not fixed.", "warn"); return false; }
  const r = await api("POST", `/api/bench/${sentenceId}/tokens`, {...change, base: S.head,
    active_seconds: Math.min(86_400, S.activeMs / 1000), actions: S.actions});
  if (r.status !== 201) {
    const msg = `Tokens not fixed: ${errorText(r.body)}`;
    if (!$("tokens").hidden) $("tokens-msg").textContent = msg;
    say(msg, "warn");
    return false;
  }
  S.activeMs = 0;
  S.actions = {};
  const {base: _base, ...back} = r.body.undo;
  const stacks = mode === "undo" ? {undo: [], redo: [{fix: back}]}
    : {undo: [{fix: back}], redo: []};
  try {
    localStorage.setItem(undoKey, JSON.stringify({tree: r.body.revision.tree, ...stacks}));
  } catch { /* the fix stands; only its undo is not kept */ }
  window.location.reload();
  return true;
}

function fromInput() {
  const pieces = $("tokens-input").value.trim().split(/\s+/).filter(Boolean);
  if (!pieces.length) { $("tokens-msg").textContent = "Type the word (or Esc)."; return; }
  if (pieces.length > 2) {
    $("tokens-msg").textContent = "One space at most: a split makes two words (split again " +
      "for more).";
    return;
  }
  applyTokenFix({position: at, count: 1, tokens: pieces});
}

function join() {
  if (at >= S.tokens.length - 1) return;
  applyTokenFix({position: at, count: 2, tokens: [S.tokens[at] + S.tokens[at + 1]]});
}

export function wireTokens() {
  $("tokens-apply").addEventListener("click", fromInput);
  $("tokens-join").addEventListener("click", join);
  $("tokens-cancel").addEventListener("click", close);
  $("tokens").addEventListener("keydown", (ev) => {
    if (ev.key === "Escape") { ev.preventDefault(); close(); }
    else if (ev.altKey && (ev.key === "ArrowLeft" || ev.key === "ArrowRight")) {
      ev.preventDefault();
      show(at + (ev.key === "ArrowLeft" ? -1 : 1));
      $("tokens-input").focus();
    } else if (ev.key === "Enter" && ev.target.id === "tokens-input") {
      ev.preventDefault();
      fromInput();
    }
    ev.stopPropagation();
  });
}
