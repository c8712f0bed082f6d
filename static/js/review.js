// The Review page: draw the submitted trees (one zoom for all, one scroll box), build the
// result (take a tree, edit it as a tree with the Bench's tree model and drawing, or as
// bracketed text, with live validation), settle it as gold or reopen a settled sentence,
// through the JSON API in app/routes/api_review.py. Keyboard shortcuts are listed in the
// page's help dialog (#rv-help).

const root = document.getElementById("rv");
const sentenceId = root.dataset.sentence;
const csrf = document.querySelector('meta[name="csrf-token"]').content;

const text = document.getElementById("rv-text");
const note = document.getElementById("rv-note");
const checkLine = document.getElementById("rv-check");
const settleButton = document.getElementById("rv-settle");
const reopenButton = document.getElementById("rv-reopen");
const outcome = document.getElementById("rv-outcome");
const sourceLabel = document.getElementById("rv-source");
const preview = document.getElementById("rv-preview");
const confirmRow = document.getElementById("rv-confirm-row");
const confirmBox = document.getElementById("rv-confirm");
const help = document.getElementById("rv-help");

// What the result started from: {annotation: id} or {gold: id} or null.
let source = null;
let checkedText = null; // the text the last successful check was for
let checkTimer = 0;
let checkSeq = 0;
let busy = false;

// The Bench's tree drawing (static/js/treeview.js); each constituent is marked with the
// combined view's kind: shared by everyone (plain), same span with other labels elsewhere
// (rv-m-split), only some annotators (rv-m-some); in the preview, a bracket no annotator
// drew is rv-m-new.
let drawTree = null;
let T = null; // the Bench's tree model (static/js/treemodel.js): reading, writing, edits
try {
  ({ drawTree } = await import("./treeview.js"));
  T = await import("./treemodel.js");
} catch (err) {
  drawTree = null; // the bracketed text below each tree stays visible
}
const readTree = (text) => T.readTree(text);
const spansOf = (tree) => T.spansOf(tree);

// The submitted trees are drawn at one zoom, the largest at which the widest fits the page,
// but never below MIN_ZOOM (labels 13 px at zoom 1 stay at least 11 px); wider than that, the
// one scroll box around all of them scrolls them together.
const MIN_ZOOM = 11 / 13;

// "start:end" -> {kind, labels: {label: [letters]}}
const combined = new Map();
for (const [start, end, kind, labels] of JSON.parse(root.dataset.combined || "[]")) {
  combined.set(`${start}:${end}`, { kind, labels: Object.fromEntries(labels) });
}
const everyone = [...document.querySelectorAll(".rv-tree")].map((p) => p.dataset.letter);

// The outer wrapper is not a bracket anyone disagrees on (the combined view leaves it out).
const WRAPPERS = new Set(["", "ROOT", "TOP"]);

function markFor(spans, index, preview) {
  const span = spans[index];
  if (index === 0 && WRAPPERS.has(span.label)) return null;
  const entry = combined.get(`${span.start}:${span.end}`);
  const owners = entry ? entry.labels[span.label] || [] : [];
  if (preview) {
    if (!owners.length) return { classes: ["rv-m-new"], title: `${span.label}: in no submitted tree` };
    return { classes: [], title: `${span.label}: as in ${owners.join(", ")}` };
  }
  if (!entry) return null;
  if (owners.length === everyone.length) return { classes: [], title: `${span.label}: everyone` };
  const kind = entry.kind === "split" ? "split" : "some";
  const others = Object.entries(entry.labels).filter(([label]) => label !== span.label)
    .map(([label, who]) => `${label} (${who.join(", ")})`);
  return {
    classes: [`rv-m-${kind}`],
    title: `${span.label}: only ${owners.join(", ")}` + (others.length ? `; others: ${others.join(", ")}` : ""),
  };
}

function draw(container, treeText, preview = false, extra = {}) {
  if (!drawTree || !container) return null;
  container.replaceChildren();
  try {
    const tree = typeof treeText === "string" ? readTree(treeText) : treeText;
    const spans = spansOf(tree);
    return drawTree(container, tree, {
      marks: (ref) => (ref.kind === "phrase" ? markFor(spans, ref.index, preview) : null),
      ...extra,
    });
  } catch (err) {
    container.replaceChildren();
    return null;
  }
}

function drawSubmitted() {
  const panels = [...document.querySelectorAll(".rv-tree")];
  const box = document.querySelector(".rv-trees");
  if (!panels.length || !box) return;
  // natural widths first, then one zoom for all
  const widths = panels.map((p) => draw(p.querySelector(".rv-drawing"), p.dataset.tree)?.width);
  if (widths.some((w) => !w)) return;
  const room = box.clientWidth - 48; // the card's padding
  const zoom = Math.min(1, Math.max(MIN_ZOOM, room / Math.max(...widths)));
  root.dataset.zoom = zoom.toFixed(3);
  for (const panel of panels) {
    draw(panel.querySelector(".rv-drawing"), panel.dataset.tree, false, { zoom });
    panel.classList.add("rv-drawn");
    panel.querySelector(".rv-text-toggle").open = false;
  }
}
drawSubmitted();

async function api(path, body) {
  const resp = await fetch(`/api/review/${sentenceId}/${path}`, {
    method: "POST",
    // an expected refusal (422 while typing, 409) comes back as 200 with its status in a
    // header, so the browser does not log it as a failed resource (app/api_errors.py)
    headers: { "Content-Type": "application/json", "X-CSRF-Token": csrf,
      "X-Treewright-Quiet-Refusal": "1" },
    body: JSON.stringify(body),
  });
  let data = null;
  try {
    data = await resp.json();
  } catch (err) {
    data = { detail: `${resp.status} ${resp.statusText}` };
  }
  const status = Number(resp.headers.get("X-Treewright-Status")) || resp.status;
  return { ok: status >= 200 && status < 300, status, data };
}

function say(el, message, kind) {
  if (!el) return;
  el.textContent = message;
  el.className = el.className.replace(/\brv-(ok|bad)\b/g, "").trim();
  if (kind) el.classList.add(`rv-${kind}`);
}

function describe(data) {
  const d = data && data.detail;
  if (typeof d === "string") return d;
  if (Array.isArray(d)) return d.map((e) => e.msg || String(e)).join("; ");
  return "the server refused the request";
}

// ------------------------------------------------------------------ the result panel
function setResult(treeText, newSource, label) {
  if (!text) return;
  text.value = treeText;
  source = newSource;
  sourceLabel.textContent = label;
  edits.length = 0;
  chosen = null;
  drawResult();
  scheduleCheck(0);
}

// ------------------------------------------------------------------ the result as a tree
// The result is edited as a tree with the Bench's tree model (treemodel.js) and drawing
// (treeview.js): choose a node (click) or words (drag), then add, relabel, dissolve or move an
// edge; each edit rewrites the bracketed text, which is checked as if typed.
const editMsg = document.getElementById("rv-edit-msg");
const labelBox = document.getElementById("rv-label");
const edits = []; // earlier texts, for undo
let chosen = null; // {kind, index} or {range: [start, end]}

function resultTree() {
  try {
    return text && text.value.trim() ? readTree(text.value) : null;
  } catch (err) {
    return null;
  }
}

function drawResult() {
  if (!preview) return;
  const tree = resultTree();
  if (!tree) { preview.replaceChildren(); return; }
  const n = T.wordsOf(tree).length;
  if (chosen && chosen.range && chosen.range[1] > n) chosen = null;
  draw(preview, tree, true, {
    selected: chosen && !chosen.range ? chosen : null,
    range: chosen && chosen.range ? chosen.range : null,
    onSelect: (ref) => { chosen = ref; drawResult(); },
    onRange: (start, end, done) => { if (done) { chosen = { range: [start, end] }; drawResult(); } },
  });
}

function edit(kind) {
  const tree = resultTree();
  if (!tree) { say(editMsg, "the text is not a tree yet: fix it or start from a tree", "bad"); return; }
  const label = (labelBox.value || "").trim();
  try {
    let out = null;
    let next = chosen;
    if (kind === "undo") {
      if (!edits.length) throw new T.EditError("nothing to take back");
      text.value = edits.pop();
      chosen = null;
      drawResult();
      scheduleCheck(0);
      say(editMsg, "taken back", null);
      return;
    }
    if (kind === "add") {
      const [a, b] = chosen && chosen.range ? chosen.range
        : chosen && chosen.kind === "tag" ? [chosen.index, chosen.index + 1]
          : chosen ? [spansOf(tree)[chosen.index].start, spansOf(tree)[chosen.index].end] : [0, 0];
      const added = T.addConstituent(tree, a, b, label);
      out = added.tree;
      next = { kind: "phrase", index: added.index };
    } else if (!chosen || chosen.range) {
      throw new T.EditError("choose a constituent first (click its label)");
    } else if (kind === "relabel") {
      out = chosen.kind === "tag" ? T.setTag(tree, chosen.index, label)
        : T.relabel(tree, chosen.index, label);
    } else if (kind === "dissolve") {
      if (chosen.kind !== "phrase") throw new T.EditError("a tag cannot be dissolved");
      out = T.removeConstituent(tree, chosen.index);
      next = null;
    } else {
      if (chosen.kind !== "phrase") throw new T.EditError("choose a constituent, not a tag");
      const [edge, dir] = kind.split("-");
      const delta = edge === "start" ? (dir === "out" ? -1 : 1) : (dir === "out" ? 1 : -1);
      const moved = T.moveEdge(tree, chosen.index, edge, delta);
      out = moved.tree;
      next = { kind: "phrase", index: moved.index };
    }
    edits.push(text.value);
    text.value = T.writeTreeIndented(out);
    chosen = next;
    drawResult();
    scheduleCheck(0);
    say(editMsg, "", null);
  } catch (err) {
    if (!(err instanceof T.EditError || err instanceof T.BracketError)) throw err;
    say(editMsg, err.message, "bad");
  }
}

for (const b of document.querySelectorAll("[data-edit]")) {
  b.addEventListener("click", () => edit(b.dataset.edit));
}

function takeTree(letter) {
  const panel = document.getElementById(`tree-${letter}`);
  if (!panel || !text) return;
  const shown = panel.querySelector(".rv-bracketed").textContent;
  setResult(shown, { annotation: Number(panel.dataset.annotation) },
    `tree ${letter} (${panel.querySelector(".rv-who").textContent})`);
}

function takeGold(goldId) {
  const item = document.querySelector(`[data-gold="${goldId}"]`);
  if (!item || !text) return;
  setResult(item.querySelector(".rv-bracketed").textContent, { gold: Number(goldId) },
    `earlier gold #${goldId}`);
}

function scheduleCheck(delay) {
  clearTimeout(checkTimer);
  checkedText = null;
  if (settleButton) settleButton.disabled = true;
  checkTimer = setTimeout(runCheck, delay);
}

async function runCheck() {
  if (!text) return;
  const value = text.value;
  if (!value.trim()) {
    say(checkLine, "", null);
    preview?.replaceChildren();
    return;
  }
  const seq = ++checkSeq;
  const { ok, data } = await api("check", { tree: value, confirm_labels: confirmBox.checked });
  if (seq !== checkSeq) return; // a newer check is on its way
  if (ok) {
    checkedText = value;
    say(checkLine, `fits the sentence: ${data.words.length} words`, "ok");
    confirmRow.hidden = !confirmBox.checked;
    settleButton.disabled = busy;
  } else {
    const d = data || {};
    confirmRow.hidden = !(d.kind === "labels" && d.can_confirm);
    say(checkLine, describe(d), "bad");
    settleButton.disabled = true;
  }
}

async function settle() {
  if (!text || busy) return;
  if (checkedText !== text.value) {
    await runCheck();
    if (checkedText !== text.value) return;
  }
  busy = true;
  settleButton.disabled = true;
  say(outcome, "settling…", null);
  const body = {
    tree: text.value,
    note: note.value || null,
    confirm_labels: confirmBox.checked,
    source_annotation_id: source && source.annotation ? source.annotation : null,
    source_gold_id: source && source.gold ? source.gold : null,
  };
  const { ok, data } = await api("settle", body);
  busy = false;
  if (ok) {
    say(outcome, "settled as gold", "ok");
    window.location.reload();
  } else {
    say(outcome, describe(data), "bad");
    settleButton.disabled = false;
  }
}

async function reopen() {
  if (!reopenButton || busy) return;
  busy = true;
  reopenButton.disabled = true;
  const { ok, data } = await api("reopen", { note: note.value || null });
  busy = false;
  if (ok) {
    window.location.reload();
  } else {
    say(outcome, describe(data), "bad");
    reopenButton.disabled = false;
  }
}

// ------------------------------------------------------------------ wiring
for (const b of document.querySelectorAll("[data-take]")) {
  b.addEventListener("click", () => takeTree(b.dataset.take));
}
for (const b of document.querySelectorAll("[data-take-gold]")) {
  b.addEventListener("click", () => takeGold(b.dataset.takeGold));
}
text?.addEventListener("input", () => { chosen = null; drawResult(); scheduleCheck(350); });
confirmBox?.addEventListener("change", () => scheduleCheck(0));
settleButton?.addEventListener("click", settle);
reopenButton?.addEventListener("click", reopen);

function openHelp(open) {
  help.hidden = !open;
  if (open) document.getElementById("rv-help-close").focus();
}
document.getElementById("rv-help-open").addEventListener("click", () => openHelp(true));
document.getElementById("rv-help-close").addEventListener("click", () => openHelp(false));

function typing(target) {
  return target instanceof HTMLElement
    && (target.isContentEditable || ["INPUT", "TEXTAREA", "SELECT"].includes(target.tagName));
}

document.addEventListener("keydown", (ev) => {
  if (ev.key === "Escape") {
    if (!help.hidden) openHelp(false);
    else if (typing(ev.target)) ev.target.blur();
    return;
  }
  if (typing(ev.target)) {
    if (ev.target === text && ev.key === "Enter" && (ev.ctrlKey || ev.metaKey)) {
      ev.preventDefault();
      settle();
    }
    return;
  }
  if (ev.ctrlKey || ev.metaKey || ev.altKey) return;
  const letters = [...document.querySelectorAll(".rv-tree")].map((p) => p.dataset.letter);
  if (/^[1-9]$/.test(ev.key) && text) {
    const letter = letters[Number(ev.key) - 1];
    if (letter) { ev.preventDefault(); takeTree(letter); }
  } else if (ev.key === "0" && text) {
    const newest = document.querySelector("[data-take-gold]");
    if (newest) { ev.preventDefault(); takeGold(newest.dataset.takeGold); }
  } else if (ev.key === "e" && text) {
    ev.preventDefault();
    text.focus();
  } else if (ev.key === "S" && ev.shiftKey) {
    ev.preventDefault();
    settle();
  } else if (ev.key === "R" && ev.shiftKey) {
    ev.preventDefault();
    reopen();
  } else if (ev.key === "[" && root.dataset.prev) {
    window.location.href = `/review/${root.dataset.prev}`;
  } else if (ev.key === "]" && root.dataset.next) {
    window.location.href = `/review/${root.dataset.next}`;
  } else if (ev.key === "?") {
    openHelp(help.hidden);
  }
});
