// bench.js: the Bench page's entry. Reads the embedded data, wires the buttons and keys, draws
// the tree, restores an unsaved local change and fetches the grammar's doubts. The work is in
// bench/: state.js (shared state), api.js (the server), status.js (save state and messages),
// saving.js (commit, autosave, drafts, conflicts), draw.js (the tree), side.js (side and text
// panels), navigate.js (choosing nodes and words), dialogs.js (prompt, yes/no, keys help),
// commands.js (every edit), keytable.js (every key with its help text) and keys.js (the
// keyboard).

import * as T from "./treemodel.js";
import {api, errorText} from "./bench/api.js";
import {cmd, fitHeight, fitWidth, saveNote, setZoom} from "./bench/commands.js";
import {toggleHelp} from "./bench/dialogs.js";
import {familiesShown, markViewport, overviewJump, readFamiliesChoice, render, showFamilies,
  toggleFold} from "./bench/draw.js";
import {openHistory, wireHistory} from "./bench/history.js";
import {onKey, onReadingsKey} from "./bench/keys.js";
import {renderHelp} from "./bench/keytable.js";
import {openTokens, wireTokens} from "./bench/tokens.js";
import {loadUndo, markDirty, noteActivity, resolveConflict, restoreDraft, setTree, storeDraft, unknownIn} from "./bench/saving.js";
import {ask, loadSaid} from "./bench/loop.js";
import {renderSide, renderText} from "./bench/side.js";
import {$, S, root, sentenceId} from "./bench/state.js";
import {setStatus} from "./bench/status.js";

function wire() {
  const actions = {
    add: () => cmd.add(), "add-pin": cmd.addPin, relabel: cmd.relabel, dissolve: cmd.dissolve,
    "edge-start-out": () => cmd.edge("start", -1), "edge-start-in": () => cmd.edge("start", 1),
    "edge-end-in": () => cmd.edge("end", -1), "edge-end-out": () => cmd.edge("end", 1),
    pin: cmd.pin, carry: cmd.carry, tokens: cmd.tokens, regrow: cmd.regrow, "take-inside": cmd.takeInside, undo: cmd.undo, redo: cmd.redo,
    "zoom-in": () => setZoom(S.zoom * 1.2), "zoom-out": () => setZoom(S.zoom / 1.2),
    help: () => toggleHelp(true), handin: cmd.handIn, "apply-text": cmd.applyText,
    "reset-text": () => { S.textEditing = false; renderText(); },
    families: () => showFamilies(!familiesShown()),
    history: openHistory, "fit-width": fitWidth, fold: toggleFold,
  };
  for (const btn of root.querySelectorAll("[data-cmd]")) {
    btn.addEventListener("click", () => actions[btn.dataset.cmd]());
  }
  renderHelp($("help-keys"));
  $("help-close").addEventListener("click", () => toggleHelp(false));
  $("conflict-keep").addEventListener("click", () => resolveConflict(true));
  $("conflict-take").addEventListener("click", () => resolveConflict(false));
  $("tree-text").addEventListener("input", () => { S.textEditing = true; });
  $("note-save").addEventListener("click", saveNote);
  $("hold-go").addEventListener("click", () => cmd.hold());
  $("hold-release").addEventListener("click", () => cmd.release());
  $("readings").addEventListener("keydown", onReadingsKey);
  wireHistory();
  wireTokens();
  for (const type of ["keydown", "pointerdown", "input", "wheel"]) {
    document.addEventListener(type, noteActivity, {capture: true, passive: true});
  }
  document.addEventListener("visibilitychange", noteActivity);
  window.addEventListener("blur", () => { S.lastActive = null; });
  $("tree-pane").addEventListener("scroll", markViewport, {passive: true});
  $("overview").addEventListener("click", overviewJump);
  document.addEventListener("keydown", onKey);
  window.addEventListener("beforeunload", (ev) => {
    if (S.dirty) { storeDraft(); ev.preventDefault(); ev.returnValue = ""; }
  });
}

async function start() {
  const embedded = $("bench-data");
  let data;
  if (embedded) data = JSON.parse(embedded.textContent);
  else {
    const r = await api("GET", `/api/bench/${sentenceId}`);
    if (r.status !== 200) { setStatus("error", errorText(r.body)); return; }
    data = r.body;
  }
  S.data = data;
  S.tokens = data.sentence.tokens;
  S.head = data.annotation.head;
  S.editable = data.editable;
  S.labels = new Set(data.labels);
  S.tags = new Set(data.tags);
  S.unseen = new Set(data.unseen_words || []);
  showFamilies(readFamiliesChoice());
  takePosteriors(data.suggestion);
  const first = T.readTree(data.tree);
  setTree(first, loadSaid(data.pins, first));
  // labels already in a saved tree were accepted before
  if (S.head) unknownIn(S.tree).forEach((l) => S.confirmed.add(l));
  if (data.start_note) {
    $("start-note").textContent = data.start_note;
    $("start-note").hidden = false;
  }
  wire();
  render();
  fitHeight();
  if (!S.editable) {
    setStatus("readonly", data.annotation.state === "submitted" ? "handed in" : data.sentence.state.replace("_", " "));
  } else {
    setStatus(S.head ? "saved" : "fresh");
    restoreDraft();
    loadUndo();
    if (data.carried_from) markDirty("tokens");  // the tree carried over to the new tokens
    renderSide();
    // the entry point from elsewhere (a sentence held back for its tokens): /bench/ID?tokens
    if (new URLSearchParams(window.location.search).has("tokens")) openTokens(0);
  }
  $("note-text").value = data.annotation.comment || "";
  $("tree-pane").focus({preventScroll: true});
  root.dataset.ready = "1";
  // the suggestion is on screen: let a benchmark or test know when
  performance.mark("bench-drawn");
  if (data.suggestion && !data.suggestion.complete) completeSuggestion();
  else if (data.suggestion) root.dataset.doubts = "1";
  // the grammar's belief given what was said so far (tag doubts come from here too)
  if (data.suggestion && S.editable) ask(false).then(() => { root.dataset.asked = "1"; });
}

function takePosteriors(sugg) {
  S.posteriors = new Map();
  if (!sugg) return;
  for (const [label, a, b, p] of sugg.posteriors) S.posteriors.set(`${label} ${a} ${b}`, p);
}

// The page was drawn from the fast parse; fetch the span posteriors and probabilities (the
// slower part) and add the doubt marks when they arrive.
async function completeSuggestion() {
  $("doubt-state").textContent = "The grammar's doubts are being computed…";
  let r;
  try {
    r = await api("GET", `/api/bench/${sentenceId}/suggestion`);
  } catch {
    r = {status: 0, body: null};
  }
  if (r.status !== 200 || !r.body) {
    $("doubt-state").textContent = "The grammar's doubts could not be computed.";
    return;
  }
  S.data.suggestion = r.body;
  takePosteriors(r.body);
  $("doubt-state").textContent = "";
  root.dataset.doubts = "1";
  render();
}

start();
