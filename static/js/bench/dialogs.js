// bench/dialogs.js: the label prompt with type-ahead, the yes/no box and the keys help.

import * as T from "../treemodel.js";
import {$, S} from "./state.js";

// Ask for a label with type-ahead from `options`; resolves to the label or null.
export function askLabel(title, initial, options, what) {
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

export function confirmBox(message, yes = "Yes", no = "Cancel") {
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


export function toggleHelp(show) {
  const box = $("help");
  box.hidden = show === undefined ? !box.hidden : !show;
  S.modal = box.hidden ? null : "help";
  if (!box.hidden) $("help-close").focus();
  else $("tree-pane").focus({preventScroll: true});
}
