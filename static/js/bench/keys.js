// bench/keys.js: the keyboard: one handler for the tree and one for the readings list. What
// each key does is the key table's (keytable.js); here only what comes before it: the help
// dialog, the text boxes and a pending conflict.

import {cmd, saveNote} from "./commands.js";
import {toggleHelp} from "./dialogs.js";
import {rowFor} from "./keytable.js";
import {renderText} from "./side.js";
import {$, S, root} from "./state.js";

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
  const row = rowFor(ev);  // the key table (keytable.js) decides, and draws the help
  if (row) {
    ev.preventDefault();
    row.run(ev);
  }
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
