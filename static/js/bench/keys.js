// bench/keys.js: the keyboard: one handler for the tree and one for the readings list.

import {cmd, fitWidth, go, saveNote, setZoom} from "./commands.js";
import {toggleHelp} from "./dialogs.js";
import {openHistory} from "./history.js";
import {familiesShown, posteriorOf, render, showFamilies, toggleFold} from "./draw.js";
import {extendRange, move, select, step} from "./navigate.js";
import {renderText} from "./side.js";
import {$, S, UNSURE, root} from "./state.js";
import {say} from "./status.js";

export function onKey(ev) {
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
  else if (k === "v") openHistory();
  else if (k === "t") cmd.tokens();
  else if (k === "w") fitWidth();
  else if (k === "z") toggleFold();
  else if (k === "f") showFamilies(!familiesShown());
  else if (k === "m" || (k === "Enter" && S.carry)) cmd.carry();
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
    if (S.carry) { S.carry = null; say("Left where it was."); render(); }
    else if (S.range) { S.range = null; S.rangeAnchor = S.rangeHead = null; render(); }
    else if (S.sel) { S.sel = null; render(); }
  } else handled = false;
  if (handled) ev.preventDefault();
}

// readings list: arrows move, Enter picks (buttons already take Enter)
export function onReadingsKey(ev) {
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
