// bench.js: the Bench page. Draws the annotator's tree, runs every edit (mouse and keyboard),
// keeps undo/redo, saves each change as a new revision (debounced) and never drops a change:
// unsaved work is mirrored to localStorage, a stale save (409) shows the other revision beside
// the local one and lets the annotator keep theirs or take the other.

import * as T from "./treemodel.js";
import {drawTree} from "./treeview.js";

const root = document.getElementById("bench");
const $ = (id) => document.getElementById(id);
const csrf = document.querySelector('meta[name="csrf-token"]').content;
const sentenceId = Number(root.dataset.sentenceId);
const draftKey = `treewright-draft-${root.dataset.userId}-${sentenceId}`;

const SAVE_DELAY_MS = 600;
const RETRY_MS = 3000;
const UNSURE = 0.5;   // below: one dot, dashed amber frame
const WEAK = 0.2;     // below: two dots, rust frame

const S = {
  data: null,
  tokens: [],
  tree: null,
  spans: [],
  pins: T.emptyPins(),
  head: 0,
  editable: false,
  sel: null,          // {kind: "phrase"|"tag", index}
  range: null,        // [start, end)
  rangeAnchor: null,
  rangeHead: null,
  undo: [],
  redo: [],
  zoom: 1,
  dirty: false,
  pendingSource: "edit",
  inflight: null,
  again: false,
  conflict: null,
  posteriors: new Map(),
  labels: new Set(),
  tags: new Set(),
  confirmed: new Set(),
  textEditing: false,
  view: null,
  modal: null,
};

// ---------------------------------------------------------------------------- server

async function api(method, path, body) {
  const init = {method, headers: {"Accept": "application/json"}, credentials: "same-origin"};
  if (body !== undefined) {
    init.headers["Content-Type"] = "application/json";
    init.headers["X-CSRF-Token"] = csrf;
    init.body = JSON.stringify(body);
  }
  const resp = await fetch(path, init);
  let data = null;
  try { data = await resp.json(); } catch { data = null; }
  return {status: resp.status, body: data};
}

function errorText(body) {
  if (!body) return "no answer";
  if (typeof body.detail === "string") return body.detail;
  if (Array.isArray(body.detail)) return body.detail.map((d) => d.msg).join("; ");
  return JSON.stringify(body.detail);
}

// ---------------------------------------------------------------------------- status

const STATUS_TEXT = {
  loading: "Loading…",
  fresh: "Start tree (not saved yet)",
  saved: "Saved",
  dirty: "Unsaved change",
  saving: "Saving…",
  conflict: "Not saved: saved elsewhere meanwhile",
  error: "Not saved",
  offline: "Not saved: no connection, retrying",
  readonly: "Read only",
};

function setStatus(state, extra = "") {
  const node = $("save-state");
  node.dataset.state = state;
  let text = STATUS_TEXT[state];
  if (state === "saved") text += ` · revision ${S.head}`;
  if (extra) text += ` · ${extra}`;
  node.textContent = text;
  root.dataset.head = String(S.head);
}

function say(message, kind = "info") {
  const node = $("bench-message");
  node.textContent = message;
  node.dataset.kind = kind;
  node.hidden = !message;
}

// ---------------------------------------------------------------------------- drafts

function storeDraft() {
  try {
    localStorage.setItem(draftKey, JSON.stringify({base: S.head, tree: T.writeTree(S.tree),
      pins: S.pins, source: S.pendingSource, at: Date.now()}));
  } catch { /* storage full or disabled: the server save is still attempted */ }
}

function clearDraft() {
  try { localStorage.removeItem(draftKey); } catch { /* nothing to clear */ }
}

function readDraft() {
  try { return JSON.parse(localStorage.getItem(draftKey) || "null"); } catch { return null; }
}

// ---------------------------------------------------------------------------- state changes

function setTree(tree, pins) {
  S.tree = tree;
  S.spans = T.spansOf(tree);
  S.pins = pins;
}

function snapshot() {
  return {tree: S.tree, pins: S.pins, sel: S.sel};
}

// Every edit ends here: remember the old state, take the new one, save soon.
function commit(tree, pins, source, sel = S.sel) {
  S.undo.push(snapshot());
  if (S.undo.length > 500) S.undo.shift();
  S.redo = [];
  setTree(tree, pins);
  S.sel = sel;
  S.range = null;
  S.rangeAnchor = S.rangeHead = null;
  markDirty(source);
  render();
}

function markDirty(source) {
  S.dirty = true;
  S.pendingSource = source;
  storeDraft();
  if (!S.conflict) {
    setStatus("dirty");
    scheduleSave();
  }
}

let saveTimer = null;

function scheduleSave(delay = SAVE_DELAY_MS) {
  clearTimeout(saveTimer);
  saveTimer = setTimeout(() => { saveNow(); }, delay);
}

function unknownIn(tree) {
  const out = new Set();
  if (S.labels.size) {
    for (const s of T.spansOf(tree).slice(1)) if (!S.labels.has(s.label)) out.add(s.label);
  }
  if (S.tags.size) {
    for (const t of T.tagsOf(tree)) if (t !== "XX" && !S.tags.has(t)) out.add(t);
  }
  return [...out];
}

async function saveNow() {
  clearTimeout(saveTimer);
  if (S.inflight) { S.again = true; return S.inflight; }
  if (!S.dirty || S.conflict || !S.editable) return undefined;
  const text = T.writeTree(S.tree);
  const pins = S.pins;
  const unknown = unknownIn(S.tree);
  const body = {base: S.head, tree: text, pins, source: S.pendingSource,
    confirm_labels: unknown.length > 0 && unknown.every((l) => S.confirmed.has(l))};
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
async function flush() {
  clearTimeout(saveTimer);
  while (S.inflight) await S.inflight;
  if (S.dirty) await saveNow();
  while (S.inflight) await S.inflight;
  return !S.dirty;
}

// ---------------------------------------------------------------------------- conflicts

function showConflict(body) {
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

function resolveConflict(keepMine) {
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
    setStatus(S.editable ? "saved" : "readonly");
    say("Took the other revision; undo (u) brings your change back.");
  }
  render();
}

// ---------------------------------------------------------------------------- drawing

function spanWords(start, end) {
  return S.tokens.slice(start, end).join(" ");
}

function posteriorOf(s) {
  if (!S.data.suggestion || !S.data.suggestion.complete) return null;
  return S.posteriors.get(`${T.stripLabel(s.label)} ${s.start} ${s.end}`) ?? 0;
}

function marks(ref) {
  if (ref.kind === "tag") {
    const pinned = T.isTagPinned(S.pins, ref.index);
    return {pinned, title: `${T.tagsOf(S.tree)[ref.index]} (POS tag of word ${ref.index + 1})` +
      (pinned ? " · pinned" : "")};
  }
  const s = S.spans[ref.index];
  const pinned = T.isSpanPinned(S.pins, s);
  const p = ref.index === 0 ? null : posteriorOf(s);
  const out = {pinned, classes: [], dots: 0};
  let title = `${s.label} · words ${s.start + 1}-${s.end}`;
  if (p !== null) {
    title += ` · grammar: ${formatP(p)}`;
    if (p < WEAK) { out.classes.push("tw-weak"); out.dots = 2; } else if (p < UNSURE) {
      out.classes.push("tw-unsure"); out.dots = 1;
    }
  }
  if (pinned) title += " · pinned";
  out.title = title;
  return out;
}

// A reading's probability: tiny ones in scientific notation rather than all "under 0.1%".
function formatProbability(p) {
  if (p >= 0.001) return formatP(p);
  if (p <= 0) return "0";
  const exp = Math.floor(Math.log10(p));
  const sup = String(exp).replace(/-/g, "⁻").replace(/\d/g, (d) => "⁰¹²³⁴⁵⁶⁷⁸⁹"[Number(d)]);
  return `${(p / 10 ** exp).toFixed(1)}·10${sup}`;
}

function formatP(p) {
  if (p < 0.001) return "under 0.1%";
  return `${(p * 100).toFixed(p < 0.1 ? 1 : 0)}%`;
}

function render() {
  S.view = drawTree($("tree-pane"), S.tree, {
    marks, selected: S.sel, range: S.range, zoom: S.zoom,
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
  });
  if (S.sel) S.view.reveal(S.sel);
  renderSide();
  renderText();
  renderReadings();
}

function renderSide() {
  const info = $("selection-info");
  if (S.range) {
    info.textContent = `Words ${S.range[0] + 1}-${S.range[1]}: ${spanWords(...S.range)}`;
  } else if (S.sel && S.sel.kind === "phrase") {
    const s = S.spans[S.sel.index];
    const p = S.sel.index === 0 ? null : posteriorOf(s);
    info.textContent = `${s.label} · words ${s.start + 1}-${s.end}: ${spanWords(s.start, s.end)}` +
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
    pin: ed && S.sel, regrow: ed && !!S.data.suggestion, undo: ed && S.undo.length > 0,
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

function renderText() {
  if (S.textEditing) return;
  $("tree-text").value = T.writeTreeIndented(S.tree);
  $("text-error").hidden = true;
}

function renderReadings() {
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
function addReading(list, text, name, className, title, onClick) {
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

// ---------------------------------------------------------------------------- selection

function select(ref) {
  S.sel = ref;
  S.range = null;
  S.rangeAnchor = S.rangeHead = null;
  render();
}

// children refs of each phrase, parent of each node; rebuilt from the tree on demand
function structure() {
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

function parentOf(ref, st) {
  if (ref.kind === "tag") return {kind: "phrase", index: st.tagParent[ref.index]};
  const p = S.spans[ref.index].parent;
  return p >= 0 ? {kind: "phrase", index: p} : null;
}

function move(dir) {
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
function order() {
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

function step(delta, filter = () => true) {
  const all = order();
  const at = S.sel ? all.findIndex((r) => r.kind === S.sel.kind && r.index === S.sel.index) : -1;
  for (let k = 1; k <= all.length; k++) {
    const r = all[(at + delta * k + all.length * k) % all.length];
    if (filter(r)) { select(r); return true; }
  }
  return false;
}

function extendRange(delta) {
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

// ---------------------------------------------------------------------------- prompts

// Ask for a label with type-ahead from `options`; resolves to the label or null.
function askLabel(title, initial, options, what) {
  return new Promise((resolve) => {
    const box = $("prompt");
    const input = $("prompt-input");
    const list = $("prompt-list");
    const msg = $("prompt-msg");
    const opts = [...options].sort();
    let shown = [];
    let hi = -1;
    let pendingUnknown = null;
    $("prompt-title").textContent = title;
    input.value = initial || "";
    msg.textContent = "";
    const draw = () => {
      const q = input.value.trim();
      const lq = q.toLowerCase();
      const starts = opts.filter((o) => o.toLowerCase().startsWith(lq));
      const inner = opts.filter((o) => !o.toLowerCase().startsWith(lq) &&
        o.toLowerCase().includes(lq));
      shown = [...starts, ...inner].slice(0, 14);
      list.replaceChildren();
      shown.forEach((o, i) => {
        const li = document.createElement("li");
        li.textContent = o;
        li.setAttribute("role", "option");
        li.className = i === hi ? "hi" : "";
        li.setAttribute("aria-selected", i === hi ? "true" : "false");
        li.addEventListener("mousedown", (ev) => { ev.preventDefault(); hi = i; accept(); });
        list.appendChild(li);
      });
    };
    const refresh = () => {
      const q = input.value.trim();
      hi = shown.length === 0 ? -1 : 0;
      draw();
      const exact = shown.indexOf(q);
      const prefix = shown.findIndex((o) => o.toLowerCase().startsWith(q.toLowerCase()));
      hi = q === "" ? -1 : exact >= 0 ? exact : prefix;
      draw();
      pendingUnknown = null;
      msg.textContent = "";
    };
    const close = (value) => {
      box.hidden = true;
      S.modal = null;
      input.removeEventListener("input", refresh);
      input.removeEventListener("keydown", onKey);
      $("prompt-cancel").removeEventListener("click", onCancel);
      $("tree-pane").focus({preventScroll: true});
      resolve(value);
    };
    const accept = () => {
      const value = hi >= 0 ? shown[hi] : input.value.trim();
      if (!T.validLabel(value)) {
        msg.textContent = value ? `'${value}' cannot be a ${what}: no spaces or brackets.`
          : `Type a ${what}.`;
        return;
      }
      if (opts.length && !options.has(value) && !S.confirmed.has(value)) {
        if (S.data.unknown_label_policy === "refuse") {
          msg.textContent = `'${value}' is not in this corpus's ${what} set.`;
          return;
        }
        if (pendingUnknown !== value) {
          pendingUnknown = value;
          msg.textContent = `'${value}' is not in this corpus's ${what} set. ` +
            "Press Enter again to use it anyway.";
          return;
        }
        S.confirmed.add(value);
      }
      close(value);
    };
    const onKey = (ev) => {
      if (ev.key === "ArrowDown") { hi = Math.min(shown.length - 1, hi + 1); draw(); ev.preventDefault(); }
      else if (ev.key === "ArrowUp") { hi = Math.max(-1, hi - 1); draw(); ev.preventDefault(); }
      else if (ev.key === "Enter") { ev.preventDefault(); accept(); }
      else if (ev.key === "Escape") { ev.preventDefault(); close(null); }
      else if (ev.key === "Tab" && hi >= 0) { ev.preventDefault(); input.value = shown[hi]; refresh(); }
      ev.stopPropagation();
    };
    const onCancel = () => close(null);
    input.addEventListener("input", refresh);
    input.addEventListener("keydown", onKey);
    $("prompt-cancel").addEventListener("click", onCancel);
    S.modal = "prompt";
    box.hidden = false;
    refresh();
    input.focus();
    input.select();
  });
}

function confirmBox(message, yes = "Yes", no = "Cancel") {
  return new Promise((resolve) => {
    const box = $("confirm");
    $("confirm-text").textContent = message;
    $("confirm-yes").textContent = yes;
    $("confirm-no").textContent = no;
    const done = (v) => {
      box.hidden = true;
      S.modal = null;
      box.removeEventListener("keydown", onKey);
      $("confirm-yes").removeEventListener("click", onYes);
      $("confirm-no").removeEventListener("click", onNo);
      $("tree-pane").focus({preventScroll: true});
      resolve(v);
    };
    const onYes = () => done(true);
    const onNo = () => done(false);
    const onKey = (ev) => {
      if (ev.key === "Escape") { ev.preventDefault(); done(false); }
      ev.stopPropagation();
    };
    box.addEventListener("keydown", onKey);
    $("confirm-yes").addEventListener("click", onYes);
    $("confirm-no").addEventListener("click", onNo);
    S.modal = "confirm";
    box.hidden = false;
    $("confirm-yes").focus();
  });
}

// ---------------------------------------------------------------------------- commands

function guard(fn) {
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
function travel(from, to, what) {
  if (!from.length) throw new T.EditError(`nothing to ${what}`);
  to.push(snapshot());
  const state = from.pop();
  setTree(state.tree, state.pins);
  S.sel = state.sel;
  S.range = null;
  markDirty("edit");
  render();
}

function requireUnpinnedPhrase() {
  if (!S.sel || S.sel.kind !== "phrase") throw new T.EditError("choose a constituent first");
  if (S.sel.index === 0) throw new T.EditError("the root stays as it is");
  const s = S.spans[S.sel.index];
  if (T.isSpanPinned(S.pins, s)) throw new T.EditError(`${s.label} is pinned: unpin it first (p)`);
  return s;
}

// Replace the tree by one the grammar offered, keeping the pins it still has.
function startFrom(text, what) {
  const tree = T.readTree(text);
  const kept = T.pinsKept(S.pins, tree);
  commit(tree, kept.pins, "alternative", {kind: "phrase", index: 0});
  say(`Started from ${what}.` +
    (kept.dropped ? ` ${kept.dropped} pins not in it were released.` : ""));
}

const cmd = {
  add: guard(async () => {
    let start;
    let end;
    if (S.range) [start, end] = S.range;
    else if (S.sel && S.sel.kind === "phrase") ({start, end} = S.spans[S.sel.index]);
    else if (S.sel) [start, end] = [S.sel.index, S.sel.index + 1];
    else throw new T.EditError("choose words first: drag across them or use Shift+arrows");
    const label = await askLabel(`New constituent over “${spanWords(start, end)}”`, "",
      S.labels, "label");
    if (!label) return;
    const out = T.addConstituent(S.tree, start, end, label);
    commit(out.tree, S.pins, "edit", {kind: "phrase", index: out.index});
  }),
  relabel: guard(async () => {
    if (!S.sel) throw new T.EditError("choose a constituent or a POS tag first");
    if (S.sel.kind === "tag") {
      const i = S.sel.index;
      if (T.isTagPinned(S.pins, i)) throw new T.EditError("this tag is pinned: unpin it first (p)");
      const tag = await askLabel(`POS tag of “${S.tokens[i]}”`, T.tagsOf(S.tree)[i], S.tags, "tag");
      if (!tag) return;
      commit(T.setTag(S.tree, i, tag), S.pins, "edit", {kind: "tag", index: i});
      return;
    }
    const s = S.spans[S.sel.index];
    if (T.isSpanPinned(S.pins, s)) throw new T.EditError(`${s.label} is pinned: unpin it first (p)`);
    const label = await askLabel(`Relabel ${s.label} over “${spanWords(s.start, s.end)}”`,
      s.label, S.labels, "label");
    if (!label || label === s.label) return;
    commit(T.relabel(S.tree, S.sel.index, label), S.pins, "edit", S.sel);
  }),
  dissolve: guard(async () => {
    requireUnpinnedPhrase();
    const parent = S.spans[S.sel.index].parent;
    commit(T.removeConstituent(S.tree, S.sel.index), S.pins, "edit",
      {kind: "phrase", index: parent});
  }),
  edge: guard(async (edge, delta) => {
    requireUnpinnedPhrase();
    const out = T.moveEdge(S.tree, S.sel.index, edge, delta);
    commit(out.tree, S.pins, "edit", {kind: "phrase", index: out.index});
  }),
  pin: guard(async () => {
    if (!S.sel) throw new T.EditError("choose a constituent or a POS tag to pin");
    const pins = S.sel.kind === "tag"
      ? T.toggleTagPin(S.pins, S.sel.index, T.tagsOf(S.tree)[S.sel.index])
      : T.toggleSpanPin(S.pins, S.spans[S.sel.index]);
    commit(S.tree, pins, "edit", S.sel);
  }),
  regrow: guard(async () => {
    if (!S.data.suggestion) throw new T.EditError("no grammar yet: nothing to re-parse with");
    const btn = root.querySelector('[data-cmd="regrow"]');
    btn.classList.add("busy");
    say("Re-parsing around the pins…");
    try {
      const r = await api("POST", `/api/bench/${sentenceId}/reparse`, {pins: S.pins, k: 1});
      if (r.status !== 200) { say(`Re-parse refused: ${errorText(r.body)}`, "warn"); return; }
      const tree = T.readTree(r.body.trees[0]);
      const kept = T.pinsKept(S.pins, tree);
      if (kept.dropped) {
        say(`The re-parse lost ${kept.dropped} pins; nothing changed.`, "warn");
        return;
      }
      commit(tree, S.pins, "reparse", {kind: "phrase", index: 0});
      say(r.body.fallback ? "Re-parsed: the grammar had no full parse, this is its fallback."
        : `Re-parsed in ${Math.round(r.body.seconds * 1000)} ms; every pin kept.`);
    } finally {
      btn.classList.remove("busy");
    }
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

async function saveNote() {
  const r = await api("PATCH", `/api/bench/${sentenceId}/note`, {comment: $("note-text").value});
  if (r.status === 200) { S.data.annotation = r.body; say("Note saved."); }
  else say(`Note not saved: ${errorText(r.body)}`, "warn");
}

function showTextError(message, line, column) {
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

async function go(id) {
  if (!id) { say("No sentence there.", "warn"); return; }
  if (S.editable && !(await flush())) {
    say("Not leaving: the last change is not saved yet.", "warn");
    return;
  }
  window.location.href = `/bench/${id}`;
}

function setZoom(z) {
  S.zoom = Math.min(3, Math.max(0.3, z));
  $("zoom-level").textContent = `${Math.round(S.zoom * 100)}%`;
  render();
}

// A deep tree starts zoomed out so that its words are on screen (never below 55%).
function fitHeight() {
  const pane = $("tree-pane");
  const room = parseFloat(getComputedStyle(pane).maxHeight) - 12;
  if (S.view && S.view.height > room && room > 0) setZoom(Math.max(0.55, room / S.view.height));
}

function toggleHelp(show) {
  const box = $("help");
  box.hidden = show === undefined ? !box.hidden : !show;
  S.modal = box.hidden ? null : "help";
  if (!box.hidden) $("help-close").focus();
  else $("tree-pane").focus({preventScroll: true});
}

// ---------------------------------------------------------------------------- keyboard

function onKey(ev) {
  if (S.modal === "help") {
    if (ev.key === "Escape" || ev.key === "?") { ev.preventDefault(); toggleHelp(false); }
    return;
  }
  if (S.modal) return;
  const t = ev.target;
  const typing = t && (t.tagName === "TEXTAREA" || t.tagName === "INPUT" || t.tagName === "SELECT");
  if (typing) {
    if (t.id === "tree-text" && ev.key === "Enter" && (ev.ctrlKey || ev.metaKey)) {
      ev.preventDefault();
      cmd.applyText();
    } else if (t.id === "note-text" && ev.key === "Enter" && (ev.ctrlKey || ev.metaKey)) {
      ev.preventDefault();
      saveNote();
    } else if (ev.key === "Escape") {
      ev.preventDefault();
      if (t.id === "tree-text") { S.textEditing = false; renderText(); }
      $("tree-pane").focus({preventScroll: true});
    }
    return;
  }
  if (S.conflict && ev.key !== "?") return;
  const ctrl = ev.ctrlKey || ev.metaKey;
  const k = ev.key;
  let handled = true;
  if (ctrl && (k === "z" || k === "Z")) { if (ev.shiftKey) cmd.redo(); else cmd.undo(); }
  else if (ctrl && k === "y") cmd.redo();
  else if (ctrl && k === "Enter") cmd.handIn();
  else if (ctrl || ev.altKey) handled = false;
  else if (k === "ArrowUp" && ev.shiftKey) {
    if (S.sel && S.sel.kind === "phrase") {
      const s = S.spans[S.sel.index];
      S.range = [s.start, s.end];
      S.rangeAnchor = s.start;
      S.rangeHead = s.end - 1;
      render();
    }
  } else if (k === "ArrowLeft" && ev.shiftKey) extendRange(-1);
  else if (k === "ArrowRight" && ev.shiftKey) extendRange(1);
  else if (k === "ArrowUp") move("up");
  else if (k === "ArrowDown") move("down");
  else if (k === "ArrowLeft") move("left");
  else if (k === "ArrowRight") move("right");
  else if (k === "Home") select({kind: "phrase", index: 0});
  else if (k === "j") step(1);
  else if (k === "k") step(-1);
  else if (k === "d") {
    const found = step(1, (r) => r.kind === "phrase" && r.index > 0 &&
      (posteriorOf(S.spans[r.index]) ?? 1) < UNSURE);
    if (!found) say("No doubtful constituent left.");
  } else if (k === "a") cmd.add();
  else if (k === "r") cmd.relabel();
  else if (k === "x" || k === "Delete") cmd.dissolve();
  else if (k === "[") cmd.edge("start", -1);
  else if (k === "{") cmd.edge("start", 1);
  else if (k === "]") cmd.edge("end", 1);
  else if (k === "}") cmd.edge("end", -1);
  else if (k === "p") cmd.pin();
  else if (k === "g") cmd.regrow();
  else if (k === "o") {
    const first = root.querySelector("#readings button");
    if (first) first.focus();
  } else if (/^[1-9]$/.test(k) && S.data.suggestion) cmd.reading(Number(k) - 1);
  else if (k === "u") cmd.undo();
  else if (k === "U") cmd.redo();
  else if (k === "e") { $("tree-text").focus(); }
  else if (k === "c") { $("note-text").focus(); }
  else if (k === "h") { $("hold-reason").focus(); }
  else if (k === "n") go(S.data.queue.next_open_id);
  else if (k === ".") go(S.data.queue.next_id);
  else if (k === ",") go(S.data.queue.prev_id);
  else if (k === "+" || k === "=") setZoom(S.zoom * 1.2);
  else if (k === "-") setZoom(S.zoom / 1.2);
  else if (k === "0") setZoom(1);
  else if (k === "?") toggleHelp(true);
  else if (k === "Escape") {
    if (S.range) { S.range = null; S.rangeAnchor = S.rangeHead = null; render(); }
    else if (S.sel) { S.sel = null; render(); }
  } else handled = false;
  if (handled) ev.preventDefault();
}

// readings list: arrows move, Enter picks (buttons already take Enter)
function onReadingsKey(ev) {
  const btns = [...root.querySelectorAll("#readings button")];
  const at = btns.indexOf(document.activeElement);
  if (at < 0) return;
  if (ev.key === "ArrowDown" || ev.key === "ArrowUp") {
    ev.preventDefault();
    ev.stopPropagation();
    const next = btns[at + (ev.key === "ArrowDown" ? 1 : -1)];
    if (next) next.focus();
  } else if (ev.key === "Escape") {
    ev.stopPropagation();
    $("tree-pane").focus({preventScroll: true});
  }
}

// ---------------------------------------------------------------------------- start

function wire() {
  const actions = {
    add: cmd.add, relabel: cmd.relabel, dissolve: cmd.dissolve,
    "edge-start-out": () => cmd.edge("start", -1), "edge-start-in": () => cmd.edge("start", 1),
    "edge-end-in": () => cmd.edge("end", -1), "edge-end-out": () => cmd.edge("end", 1),
    pin: cmd.pin, regrow: cmd.regrow, undo: cmd.undo, redo: cmd.redo,
    "zoom-in": () => setZoom(S.zoom * 1.2), "zoom-out": () => setZoom(S.zoom / 1.2),
    help: () => toggleHelp(true), handin: cmd.handIn, "apply-text": cmd.applyText,
    "reset-text": () => { S.textEditing = false; renderText(); },
  };
  for (const btn of root.querySelectorAll("[data-cmd]")) {
    btn.addEventListener("click", () => actions[btn.dataset.cmd]());
  }
  $("help-close").addEventListener("click", () => toggleHelp(false));
  $("conflict-keep").addEventListener("click", () => resolveConflict(true));
  $("conflict-take").addEventListener("click", () => resolveConflict(false));
  $("tree-text").addEventListener("input", () => { S.textEditing = true; });
  $("note-save").addEventListener("click", saveNote);
  $("hold-go").addEventListener("click", () => cmd.hold());
  $("hold-release").addEventListener("click", () => cmd.release());
  $("readings").addEventListener("keydown", onReadingsKey);
  document.addEventListener("keydown", onKey);
  window.addEventListener("beforeunload", (ev) => {
    if (S.dirty) { storeDraft(); ev.preventDefault(); ev.returnValue = ""; }
  });
}

function restoreDraft() {
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
  takePosteriors(data.suggestion);
  setTree(T.readTree(data.tree), {spans: data.pins.spans, tags: data.pins.tags});
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
  }
  $("note-text").value = data.annotation.comment || "";
  $("tree-pane").focus({preventScroll: true});
  root.dataset.ready = "1";
  // the suggestion is on screen: let a benchmark or test know when
  performance.mark("bench-drawn");
  if (data.suggestion && !data.suggestion.complete) completeSuggestion();
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
