// bench/saving.js: saving and conflicts. Every edit goes through commit(), which keeps undo,
// mirrors the unsaved tree to localStorage and saves it as a new revision (debounced); a stale
// save (409) shows the other revision beside the local one and lets the annotator keep theirs
// or take the other.

import * as T from "../treemodel.js";
import {api, errorText} from "./api.js";
import {confirmBox} from "./dialogs.js";
import {render} from "./draw.js";
import {askSoon, keepSaid, showOffer, withSaid} from "./loop.js";
import {renderSide} from "./side.js";
import {$, RETRY_MS, S, SAVE_DELAY_MS, draftKey, sentenceId, undoKey} from "./state.js";
import {say, setStatus} from "./status.js";

export function storeDraft() {
  try {
    localStorage.setItem(draftKey, JSON.stringify({base: S.head, tree: T.writeTree(S.tree),
      pins: S.pins, source: S.pendingSource, at: Date.now()}));
  } catch { /* storage full or disabled: the server save is still attempted */ }
}

export function clearDraft() {
  try { localStorage.removeItem(draftKey); } catch { /* nothing to clear */ }
}

export function readDraft() {
  try { return JSON.parse(localStorage.getItem(draftKey) || "null"); } catch { return null; }
}

export function setTree(tree, pins) {
  S.tree = tree;
  S.spans = T.spansOf(tree);
  S.pins = pins;
}

export function snapshot() {
  return {tree: S.tree, pins: S.pins, sel: S.sel, text: T.writeTree(S.tree)};
}

// The undo and redo stacks survive a reload: kept in this browser with the tree they lead
// from, and taken back only when the page opens on that same tree.
const UNDO_KEPT = 100;

export function storeUndo() {
  const keep = (stack) => stack.slice(-UNDO_KEPT).map((e) => (e.fix ? {fix: e.fix} : {
    text: e.text || T.writeTree(e.tree), pins: e.pins, sel: e.sel}));
  try {
    localStorage.setItem(undoKey, JSON.stringify({tree: T.writeTree(S.tree), undo: keep(S.undo),
      redo: keep(S.redo)}));
  } catch { /* storage full or disabled: undo still works until the page closes */ }
}

export function loadUndo() {
  let saved;
  try { saved = JSON.parse(localStorage.getItem(undoKey) || "null"); } catch { return; }
  if (!saved || saved.tree !== T.writeTree(S.tree)) return;
  // a token fix is undone by the fix that takes it back (bench/tokens.js)
  const back = (stack) => stack.map((e) => (e.fix ? e : {tree: T.readTree(e.text),
    pins: e.pins, sel: e.sel, text: e.text}))
    .filter((e) => e.fix || !T.wordMismatch(e.tree, S.tokens));
  try {
    S.undo = back(saved.undo);
    S.redo = back(saved.redo);
  } catch (err) {
    if (!(err instanceof T.BracketError)) throw err;
  }
}

// Edit actions by kind, counted with the next save; a revision source names its own kind.
const KIND_OF_SOURCE = {alternative: "reading", reparse: "reparse", text: "text",
  restore: "restore", tokens: "tokens"};

export function tally(kind) {
  S.actions[kind] = (S.actions[kind] || 0) + 1;
}

// Active editing time: the gaps between the annotator's inputs, a gap over a minute (or with
// the page hidden) not counted.
const IDLE_MS = 60_000;

export function noteActivity() {
  const now = performance.now();
  if (S.lastActive !== null && !document.hidden && now - S.lastActive <= IDLE_MS) {
    S.activeMs += now - S.lastActive;
  }
  S.lastActive = document.hidden ? null : now;
}

// Every edit ends here: remember the old state, take the new one, save soon.
export function commit(tree, pins, source, sel = S.sel, kind = KIND_OF_SOURCE[source]) {
  if (kind) tally(kind);
  S.undo.push(snapshot());
  if (S.undo.length > 500) S.undo.shift();
  S.redo = [];
  // what the annotator changed is theirs (kept by every re-parse); the grammar's is not
  const said = source === "edit" || source === "text" ? withSaid(S.tree, tree, pins)
    : keepSaid(pins, tree);
  setTree(tree, said);
  S.offer = null;
  showOffer(false);
  if (source !== "reparse") askSoon();
  S.sel = sel;
  S.range = null;
  S.rangeAnchor = S.rangeHead = null;
  markDirty(source);
  render();
}

export function markDirty(source) {
  S.dirty = true;
  S.pendingSource = source;
  storeDraft();
  storeUndo();
  if (!S.conflict) {
    setStatus("dirty");
    scheduleSave();
  }
}

let saveTimer = null;

export function scheduleSave(delay = SAVE_DELAY_MS) {
  clearTimeout(saveTimer);
  saveTimer = setTimeout(() => { saveNow(); }, delay);
}

export function unknownIn(tree) {
  const out = new Set();
  if (S.labels.size) {
    for (const s of T.spansOf(tree).slice(1)) if (!S.labels.has(s.label)) out.add(s.label);
  }
  if (S.tags.size) {
    for (const t of T.tagsOf(tree)) if (t !== "XX" && !S.tags.has(t)) out.add(t);
  }
  return [...out];
}

export async function saveNow() {
  clearTimeout(saveTimer);
  if (S.inflight) { S.again = true; return S.inflight; }
  if (!S.dirty || S.conflict || !S.editable) return undefined;
  const text = T.writeTree(S.tree);
  const pins = S.pins;
  const unknown = unknownIn(S.tree);
  const sentMs = S.activeMs;
  const sentActions = {...S.actions};
  const body = {base: S.head, tree: text, pins, source: S.pendingSource,
    confirm_labels: unknown.length > 0 && unknown.every((l) => S.confirmed.has(l)),
    active_seconds: Math.min(86_400, sentMs / 1000), actions: sentActions};
  if (!S.head) body.start = S.data.tree;
  setStatus("saving");
  S.inflight = (async () => {
    let r;
    try {
      r = await api("POST", `/api/bench/${sentenceId}/revisions`, body);
    } catch {
      setStatus("offline");
      scheduleSave(RETRY_MS);
      return;
    }
    if (r.status === 201) {
      S.activeMs -= sentMs;
      for (const [k, n] of Object.entries(sentActions)) S.actions[k] -= n;
      S.head = r.body.revision.number;
      S.data.annotation = r.body.annotation;
      if (T.writeTree(S.tree) === text && S.pins === pins) {
        S.dirty = false;
        clearDraft();
        setStatus("saved");
        $("start-note").hidden = true;
      } else {
        storeDraft();
        scheduleSave(0);
      }
      renderSide();
    } else if (r.status === 503) {
      // the database was busy (a large import, say) and nothing was stored: send it again
      const wait = r.body && r.body.retry_after ? r.body.retry_after * 1000 : RETRY_MS;
      setStatus("busy");
      scheduleSave(wait);
    } else if (r.status === 409) {
      showConflict(r.body);
    } else if (r.status === 422 && r.body && r.body.kind === "labels" && r.body.can_confirm) {
      const ok = await confirmBox(`${errorText(r.body)}.`, "Use them", "Not now");
      if (ok) {
        r.body.labels.forEach((l) => S.confirmed.add(l));
        S.again = true;
      } else {
        setStatus("error", "labels outside the set");
      }
    } else if (r.status === 401) {
      setStatus("error", "logged out: log in again in another tab, this change is kept here");
    } else {
      setStatus("error", errorText(r.body));
    }
  })();
  try { await S.inflight; } finally { S.inflight = null; }
  if (S.again) {
    S.again = false;
    if (S.dirty && !S.conflict) return saveNow();
  }
  return undefined;
}

// Wait until nothing is unsaved; false when a save could not be made.
export async function flush() {
  clearTimeout(saveTimer);
  while (S.inflight) await S.inflight;
  if (S.dirty) await saveNow();
  while (S.inflight) await S.inflight;
  return !S.dirty;
}

export function showConflict(body) {
  S.conflict = body;
  setStatus("conflict");
  const box = $("conflict");
  box.hidden = false;
  const cur = body.current;
  $("conflict-detail").textContent = cur
    ? `${errorText(body)}. Revision ${cur.number} (${cur.source}, ${cur.created_at.replace("T", " ").slice(0, 19)} UTC) is newer than the one this change was built on. Your change is still here.`
    : `${errorText(body)}. Your change is still here.`;
  $("conflict-theirs").textContent = cur ? cur.tree : "";
  $("conflict-keep").disabled = !(body.state !== "submitted");
  $("conflict-keep").focus();
}

export function resolveConflict(keepMine) {
  const c = S.conflict;
  if (!c) return;
  S.conflict = null;
  $("conflict").hidden = true;
  if (c.state === "submitted") {
    S.editable = false;
  }
  if (keepMine) {
    S.head = c.head;
    markDirty(S.pendingSource);
    saveNow();
  } else if (c.current) {
    S.undo.push(snapshot());   // the local change stays reachable with undo
    S.redo = [];
    setTree(T.readTree(c.current.tree), c.current.pins || T.emptyPins());
    S.head = c.current.number;
    S.dirty = false;
    clearDraft();
    storeUndo();
    setStatus(S.editable ? "saved" : "readonly");
    say("Took the other revision; undo (u) brings your change back.");
  }
  render();
}

export function restoreDraft() {
  const draft = readDraft();
  if (!draft || !S.editable) return;
  if (draft.tree === T.writeTree(S.tree) && JSON.stringify(draft.pins) === JSON.stringify(S.pins)) {
    clearDraft();
    return;
  }
  let tree;
  try { tree = T.readTree(draft.tree); } catch { clearDraft(); return; }
  if (T.wordMismatch(tree, S.tokens)) { clearDraft(); return; }
  const server = {number: S.head, tree: T.writeTree(S.tree), pins: S.pins, source: S.data.source,
    created_at: new Date().toISOString()};
  S.undo.push(snapshot());
  setTree(tree, draft.pins || T.emptyPins());
  S.pendingSource = draft.source || "edit";
  S.dirty = true;
  render();
  if (draft.base === S.head) {
    say("Restored a change that had not reached the server; saving it now.");
    setStatus("dirty");
    scheduleSave(0);
  } else {
    showConflict({detail: `this browser kept an unsaved change built on revision ${draft.base}`,
      current: S.head ? server : null, head: S.head, state: S.data.annotation.state});
  }
}
