// bench/state.js: shared state of the Bench page: its elements, the sentence, the tree on
// screen, undo/redo, the save machinery's flags, the open dialog.

import * as T from "../treemodel.js";

export const root = document.getElementById("bench");
export const $ = (id) => document.getElementById(id);
export const csrf = document.querySelector('meta[name="csrf-token"]').content;
export const sentenceId = Number(root.dataset.sentenceId);
export const draftKey = `treewright-draft-${root.dataset.userId}-${sentenceId}`;
export const undoKey = `treewright-undo-${root.dataset.userId}-${sentenceId}`;

export const SAVE_DELAY_MS = 600;
export const RETRY_MS = 3000;
export const UNSURE = 0.5;   // below: one dot, dashed amber frame
export const WEAK = 0.2;     // below: two dots, rust frame

export const S = {
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
  tagPosteriors: [],  // per word {tag: p}, under everything said (bench/loop.js)
  offer: null,        // a re-parse that would change the tree, not taken yet
  labels: new Set(),
  tags: new Set(),
  confirmed: new Set(),
  textEditing: false,
  view: null,
  modal: null,
  unseen: new Set(),  // positions of words the grammar never saw
  carry: null,
  folded: new Set(),
  activeMs: 0,        // active editing time not yet sent with a save
  lastActive: null,   // performance.now() of the last input, null after a pause
  actions: {},        // edit actions by kind not yet sent with a save  // "label start end" of the phrases drawn folded        // a node taken to be moved: {ref, targets: Set of phrase indices}
};
