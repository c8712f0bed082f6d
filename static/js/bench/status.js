// bench/status.js: the save state shown top left and the one-line message beside it.

import {$, S, root} from "./state.js";

const STATUS_TEXT = {
  loading: "Loading…",
  fresh: "Start tree (not saved yet)",
  saved: "Saved",
  dirty: "Unsaved change",
  saving: "Saving…",
  conflict: "Not saved: saved elsewhere meanwhile",
  error: "Not saved",
  offline: "Not saved: no connection, retrying",
  busy: "Not saved yet: the server is busy, retrying",
  readonly: "Read only",
};

export function setStatus(state, extra = "") {
  const node = $("save-state");
  node.dataset.state = state;
  let text = STATUS_TEXT[state];
  if (state === "saved") text += ` · revision ${S.head}`;
  if (extra) text += ` · ${extra}`;
  node.textContent = text;
  root.dataset.head = String(S.head);
}

export function say(message, kind = "info") {
  const node = $("bench-message");
  node.textContent = message;
  node.dataset.kind = kind;
  node.hidden = !message;
}
