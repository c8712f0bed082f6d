// The Review page: draw the submitted trees, build the result (take a tree, edit its
// bracketed text with live validation), settle it as gold or reopen a settled sentence,
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
let readTree = null;
let spansOf = null;
try {
  ({ drawTree } = await import("./treeview.js"));
  ({ readTree, spansOf } = await import("./treemodel.js"));
} catch (err) {
  drawTree = null; // the bracketed text below each tree stays visible
}

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

function draw(container, treeText, preview = false) {
  if (!drawTree || !container) return false;
  container.replaceChildren();
  try {
    const tree = readTree(treeText);
    const spans = spansOf(tree);
    drawTree(container, tree, {
      marks: (ref) => (ref.kind === "phrase" ? markFor(spans, ref.index, preview) : null),
    });
    return true;
  } catch (err) {
    container.replaceChildren();
    return false;
  }
}

for (const panel of document.querySelectorAll(".rv-tree")) {
  if (draw(panel.querySelector(".rv-drawing"), panel.dataset.tree)) {
    panel.classList.add("rv-drawn");
    panel.querySelector(".rv-text-toggle").open = false;
  }
}

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
  scheduleCheck(0);
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
    draw(preview, data.tree, true);
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
text?.addEventListener("input", () => scheduleCheck(350));
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
