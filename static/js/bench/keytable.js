// bench/keytable.js: the Bench's keys, written once. Each row says which keys it answers (as the
// help shows them), what it does (the help's words) and how (run). keys.js asks the table what
// to do with a key press and the help dialog is drawn from the same rows, so a key and its
// description cannot drift apart. A new key is a new row here, nowhere else.
//
// A row: {id, group, keys: [[key, ...], ...] (alternatives, each a chord shown as kbd's),
// text, match(ev) -> bool, run(ev)}.
// Rows are tried in order; the first that matches runs. Presses with Ctrl, Cmd or Alt reach only
// rows whose match asks for them.

import {cmd, fitWidth, go, setZoom} from "./commands.js";
import {toggleHelp} from "./dialogs.js";
import {familiesShown, posteriorOf, render, showFamilies, toggleFold} from "./draw.js";
import {openHistory} from "./history.js";
import {extendRange, move, select, step} from "./navigate.js";
import {$, S, UNSURE, root} from "./state.js";
import {say} from "./status.js";

export const GROUPS = [["move", "Move"], ["change", "Change"], ["finish", "Finish"]];

const plain = (ev) => !(ev.ctrlKey || ev.metaKey || ev.altKey);
const ctrl = (ev) => (ev.ctrlKey || ev.metaKey) && !ev.altKey;
const is = (...names) => (ev) => plain(ev) && names.includes(ev.key);
const shifted = (...names) => (ev) => plain(ev) && ev.shiftKey && names.includes(ev.key);
const unshifted = (...names) => (ev) => plain(ev) && !ev.shiftKey && names.includes(ev.key);

function chooseWordsOfConstituent() {
  if (!S.sel || S.sel.kind !== "phrase") return;
  const s = S.spans[S.sel.index];
  S.range = [s.start, s.end];
  S.rangeAnchor = s.start;
  S.rangeHead = s.end - 1;
  render();
}

function leaveChoice() {
  if (S.carry) { S.carry = null; say("Left where it was."); render(); }
  else if (S.range) { S.range = null; S.rangeAnchor = S.rangeHead = null; render(); }
  else if (S.sel) { S.sel = null; render(); }
}

function nextDoubtful() {
  const found = step(1, (r) => r.kind === "phrase" && r.index > 0 &&
    (posteriorOf(S.spans[r.index]) ?? 1) < UNSURE);
  if (!found) say("No doubtful constituent left.");
}

export const KEYS = [
  // --- move
  {id: "parent-child", group: "move", keys: [["↑"], ["↓"]], text: "parent / first child",
    match: unshifted("ArrowUp", "ArrowDown"),
    run: (ev) => move(ev.key === "ArrowUp" ? "up" : "down")},
  {id: "siblings", group: "move", keys: [["←"], ["→"]],
    text: "previous / next sibling (on a tag: neighbour word)",
    match: unshifted("ArrowLeft", "ArrowRight"),
    run: (ev) => move(ev.key === "ArrowLeft" ? "left" : "right")},
  {id: "reading-order", group: "move", keys: [["j"], ["k"]],
    text: "next / previous node in reading order",
    match: is("j", "k"), run: (ev) => step(ev.key === "j" ? 1 : -1)},
  {id: "root", group: "move", keys: [["Home"]], text: "the root",
    match: is("Home"), run: () => select({kind: "phrase", index: 0})},
  {id: "doubtful", group: "move", keys: [["d"]], text: "next doubtful constituent (dotted)",
    match: is("d"), run: nextDoubtful},
  {id: "word-range", group: "move", keys: [["Shift", "←"], ["Shift", "→"]],
    text: "choose words: grow or shrink the word range",
    match: shifted("ArrowLeft", "ArrowRight"),
    run: (ev) => extendRange(ev.key === "ArrowLeft" ? -1 : 1)},
  {id: "constituent-words", group: "move", keys: [["Shift", "↑"]],
    text: "choose the words of the chosen constituent",
    match: shifted("ArrowUp"), run: chooseWordsOfConstituent},
  {id: "leave", group: "move", keys: [["Esc"]],
    text: "put a carried node back, drop the word range, then the choice",
    match: is("Escape"), run: leaveChoice},
  // --- change
  {id: "add", group: "change", keys: [["a"]], text: "add a bracket over the chosen words",
    match: is("a"), run: () => cmd.add()},
  {id: "add-pin", group: "change", keys: [["A"]],
    text: "add a bracket over the chosen words and pin it, in one step",
    match: is("A"), run: () => cmd.addPin()},
  {id: "relabel", group: "change", keys: [["r"]], text: "relabel (on a tag: change the POS tag)",
    match: is("r"), run: () => cmd.relabel()},
  {id: "dissolve", group: "change", keys: [["x"], ["Del"]],
    text: "dissolve: remove, children move up",
    match: is("x", "Delete"), run: () => cmd.dissolve()},
  {id: "tokens", group: "change", keys: [["t"]],
    text: "fix the tokens: respell, split or join the chosen word",
    match: is("t"), run: () => cmd.tokens()},
  {id: "carry", group: "change", keys: [["m"]],
    text: "move: take the chosen node, walk to its new parent, m or ⏎ puts it down " +
      "(or drag a label onto the new parent)",
    match: (ev) => is("m")(ev) || (is("Enter")(ev) && Boolean(S.carry)), run: () => cmd.carry()},
  {id: "left-edge", group: "change", keys: [["["], ["{"]], text: "left edge one word out / in",
    match: is("[", "{"), run: (ev) => cmd.edge("start", ev.key === "[" ? -1 : 1)},
  {id: "right-edge", group: "change", keys: [["]"], ["}"]], text: "right edge one word out / in",
    match: is("]", "}"), run: (ev) => cmd.edge("end", ev.key === "]" ? 1 : -1)},
  {id: "pin", group: "change", keys: [["p"]], text: "pin / unpin",
    match: is("p"), run: () => cmd.pin()},
  {id: "regrow", group: "change", keys: [["g"]],
    text: "regrow: re-parse around everything you said (pins, your edits, removed brackets, " +
      "corrected tags); takes the offered reading when one is shown",
    match: is("g"), run: () => cmd.regrow()},
  {id: "offered-readings", group: "change", keys: [["G"]],
    text: "next offered reading: step through the re-parse's proposal and the k best " +
      "readings under what you said (g takes the one shown)",
    match: is("G"), run: () => cmd.nextOffered()},
  {id: "take-inside", group: "change", keys: [["i"]],
    text: "take the offered reading shown only inside the chosen constituent (the rest of " +
      "the tree stays)",
    match: is("i"), run: () => cmd.takeInside()},
  {id: "readings", group: "change", keys: [["o"]],
    text: "go to the readings (the consensus first; ↑ ↓ choose, ⏎ starts from one)",
    match: is("o"),
    run: () => { const first = root.querySelector("#readings button"); if (first) first.focus(); }},
  {id: "reading-n", group: "change", keys: [["1…9"]],
    text: "start from the grammar's n-th best tree",
    match: (ev) => plain(ev) && /^[1-9]$/.test(ev.key) && Boolean(S.data.suggestion),
    run: (ev) => cmd.reading(Number(ev.key) - 1)},
  {id: "undo", group: "change", keys: [["u"], ["Ctrl", "Z"]],
    text: "undo (kept across a reload)",
    match: (ev) => is("u")(ev) || (ctrl(ev) && !ev.shiftKey && (ev.key === "z" || ev.key === "Z")),
    run: () => cmd.undo()},
  {id: "redo", group: "change", keys: [["U"], ["Ctrl", "Y"], ["Ctrl", "Shift", "Z"]],
    text: "redo",
    match: (ev) => is("U")(ev) || (ctrl(ev) && ev.key === "y") ||
      (ctrl(ev) && ev.shiftKey && (ev.key === "z" || ev.key === "Z")),
    run: () => cmd.redo()},
  {id: "history", group: "change", keys: [["v"]],
    text: "history: your saved revisions, what each changed, drawn against the current tree; " +
      "⏎ restores one",
    match: is("v"), run: () => openHistory()},
  {id: "text", group: "change", keys: [["e"]],
    text: "edit the bracketed text; Ctrl+⏎ applies it, Esc goes back to the tree",
    match: is("e"), run: () => $("tree-text").focus()},
  // --- finish
  {id: "hand-in", group: "finish", keys: [["Ctrl", "⏎"]], text: "hand in (asks first)",
    match: (ev) => ctrl(ev) && ev.key === "Enter", run: () => cmd.handIn()},
  {id: "note", group: "finish", keys: [["c"]], text: "write a note; Ctrl+⏎ saves it",
    match: is("c"), run: () => $("note-text").focus()},
  {id: "hold", group: "finish", keys: [["h"]], text: "hold back with a reason",
    match: is("h"), run: () => $("hold-reason").focus()},
  {id: "next-open", group: "finish", keys: [["n"]], text: "next unfinished sentence",
    match: is("n"), run: () => go(S.data.queue.next_open_id)},
  {id: "queue-steps", group: "finish", keys: [[","], ["."]],
    text: "previous / next in the queue",
    match: is(",", "."),
    run: (ev) => go(ev.key === "," ? S.data.queue.prev_id : S.data.queue.next_id)},
  {id: "zoom", group: "finish", keys: [["+"], ["-"], ["0"]], text: "zoom in / out / reset",
    match: is("+", "=", "-", "0"),
    run: (ev) => setZoom(ev.key === "0" ? 1 : ev.key === "-" ? S.zoom / 1.2 : S.zoom * 1.2)},
  {id: "fit-width", group: "finish", keys: [["w"]],
    text: "fit the tree's width on screen, labels kept legible (a wider tree scrolls; " +
      "0 back to full size)",
    match: is("w"), run: () => fitWidth()},
  {id: "fold", group: "finish", keys: [["z"]],
    text: "fold / unfold the chosen constituent (choosing a node inside unfolds it)",
    match: is("z"), run: () => toggleFold()},
  {id: "families", group: "finish", keys: [["f"]], text: "phrase family colours on / off",
    match: is("f"), run: () => showFamilies(!familiesShown())},
  {id: "help", group: "finish", keys: [["?"]], text: "this list",
    match: is("?"), run: () => toggleHelp(true)},
];

// The row a key press asks for, or null.
export function rowFor(ev) {
  return KEYS.find((row) => row.match(ev)) || null;
}

// Draw the help from the table into `box`: a heading per group, then one element per row
// holding its keys and its description side by side.
export function renderHelp(box) {
  box.replaceChildren();
  for (const [group, title] of GROUPS) {
    const col = document.createElement("section");
    col.className = "help-group";
    const h = document.createElement("h3");
    h.textContent = title;
    col.append(h);
    for (const row of KEYS.filter((r) => r.group === group)) {
      const line = document.createElement("div");
      line.className = "help-row";
      line.dataset.key = row.id;
      const keys = document.createElement("span");
      keys.className = "help-keys";
      row.keys.forEach((chord, i) => {
        if (i) keys.append(" ");
        chord.forEach((k, j) => {
          if (j) keys.append("+");
          const kbd = document.createElement("kbd");
          kbd.textContent = k;
          keys.append(kbd);
        });
      });
      const text = document.createElement("span");
      text.className = "help-text";
      text.textContent = row.text;
      line.append(keys, text);
      col.append(line);
    }
    box.append(col);
  }
}
