// bench/history.js: the annotator's saved revisions: a list (newest first, when, how it was
// made, what it changed from the one before), the chosen one drawn with the brackets and tags
// it does not share with the current tree marked, and restoring one as a new revision.

import * as T from "../treemodel.js";
import {drawTree} from "../treeview.js";
import {api, errorText} from "./api.js";
import {commit} from "./saving.js";
import {$, S, sentenceId} from "./state.js";
import {say} from "./status.js";

const key = (s) => `${s.label} ${s.start} ${s.end}`;
const spanName = (s) => `${s.label} ${s.start + 1}-${s.end}`;

// Brackets only in `a`, only in `b`, and the words whose tags differ.
export function treeDifference(a, b) {
  const sa = T.spansOf(a).slice(1);
  const sb = T.spansOf(b).slice(1);
  const ka = new Set(sa.map(key));
  const kb = new Set(sb.map(key));
  const ta = T.tagsOf(a);
  const tb = T.tagsOf(b);
  return {
    onlyA: sa.filter((s) => !kb.has(key(s))),
    onlyB: sb.filter((s) => !ka.has(key(s))),
    tags: ta.map((t, i) => (t !== tb[i] ? i : -1)).filter((i) => i >= 0),
  };
}

// What a revision changed from the one before it, in a few words.
function changeLine(before, after) {
  if (!before) return "first save";
  const d = treeDifference(after, before);
  const parts = [...d.onlyA.map((s) => `+${spanName(s)}`), ...d.onlyB.map((s) => `−${spanName(s)}`),
    ...d.tags.map((i) => `word ${i + 1} ${T.tagsOf(before)[i]}→${T.tagsOf(after)[i]}`)];
  if (!parts.length) return "same tree (pins or a re-save)";
  return parts.slice(0, 4).join(", ") + (parts.length > 4 ? ` and ${parts.length - 4} more` : "");
}

let revisions = [];
let trees = [];
let at = 0;

function when(iso) {
  const d = new Date(iso.endsWith("Z") || iso.includes("+") ? iso : `${iso}Z`);
  return d.toLocaleString(undefined, {dateStyle: "medium", timeStyle: "medium"});
}

function show(i) {
  at = Math.max(0, Math.min(revisions.length - 1, i));
  const items = $("history-list").children;
  for (let k = 0; k < items.length; k++) {
    items[k].classList.toggle("hi", k === at);
    items[k].setAttribute("aria-selected", k === at ? "true" : "false");
  }
  if (items[at]) items[at].scrollIntoView({block: "nearest"});
  const tree = trees[at];
  const d = treeDifference(tree, S.tree);
  const only = new Set(d.onlyA.map(key));
  const spans = T.spansOf(tree);
  drawTree($("history-tree"), tree, {
    marks: (ref) => {
      const differs = ref.kind === "phrase" ? only.has(key(spans[ref.index]))
        : d.tags.includes(ref.index);
      return differs ? {classes: ["tw-diff-only"], title: "not in your current tree"} : null;
    },
  });
  const r = revisions[at];
  $("history-diff").textContent = !d.onlyA.length && !d.onlyB.length && !d.tags.length
    ? `Revision ${r.number} is the same as your current tree.`
    : `Revision ${r.number} against your current tree: ${d.onlyA.length} ` +
      `${d.onlyA.length === 1 ? "bracket" : "brackets"} only here (marked)` +
      (d.onlyB.length ? `; only in the current tree: ${d.onlyB.map(spanName).join(", ")}` : "") +
      (d.tags.length ? `; ${d.tags.length} ${d.tags.length === 1 ? "tag differs" : "tags differ"}` +
        " (marked)" : "") + ".";
}

function close() {
  $("history").hidden = true;
  S.modal = null;
  $("tree-pane").focus({preventScroll: true});
}

function restore() {
  const r = revisions[at];
  if (!r) return;
  close();
  if (!S.editable || S.conflict) {
    say(S.conflict ? "Settle the conflict first." : "This annotation is read only.", "warn");
    return;
  }
  commit(trees[at], r.pins || T.emptyPins(), "restore", {kind: "phrase", index: 0});
  say(`Revision ${r.number} restored as a new revision; undo (u) goes back.`);
}

export async function openHistory() {
  const r = await api("GET", `/api/bench/${sentenceId}/revisions`);
  if (r.status !== 200) { say(`No history: ${errorText(r.body)}`, "warn"); return; }
  if (!r.body.length) { say("Nothing saved yet: the history starts with the first save."); return; }
  revisions = r.body;
  trees = revisions.map((rev) => T.readTree(rev.tree));
  const list = $("history-list");
  list.replaceChildren();
  revisions.forEach((rev, i) => {
    const li = document.createElement("li");
    li.setAttribute("role", "option");
    li.dataset.number = String(rev.number);
    const head = document.createElement("div");
    head.textContent = `Revision ${rev.number} · ${when(rev.created_at)} · ${rev.source}`;
    const what = document.createElement("div");
    what.className = "what";
    what.textContent = changeLine(trees[i + 1] || null, trees[i]);
    li.append(head, what);
    li.addEventListener("click", () => show(i));
    li.addEventListener("dblclick", () => { show(i); restore(); });
    list.appendChild(li);
  });
  $("history-restore").disabled = !S.editable;
  S.modal = "history";
  $("history").hidden = false;
  show(0);
  $("history-restore").focus();
}

export function wireHistory() {
  $("history-close").addEventListener("click", close);
  $("history-restore").addEventListener("click", restore);
  $("history").addEventListener("keydown", (ev) => {
    if (ev.key === "ArrowDown" || ev.key === "ArrowUp") {
      ev.preventDefault();
      show(at + (ev.key === "ArrowDown" ? 1 : -1));
    } else if (ev.key === "Escape") {
      ev.preventDefault();
      close();
    } else if (ev.key === "Enter" && ev.target.id !== "history-close") {
      ev.preventDefault();
      restore();
    }
    ev.stopPropagation();
  });
}
