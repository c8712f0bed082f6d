// bench/loop.js: the parser in the loop. Everything the annotator says is kept with the pins:
// brackets they added or relabelled (edited_spans), tags they corrected (edited_tags) and
// brackets they removed (removed_spans). The grammar is asked again after each edit, around all
// of that: its answer updates the doubt marks (its belief about what nobody has touched yet)
// and, when it would change the tree, is offered with what it would change; g takes it.

import * as T from "../treemodel.js";
import {api, errorText} from "./api.js";
import {render} from "./draw.js";
import {commit} from "./saving.js";
import {$, S, sentenceId} from "./state.js";
import {say} from "./status.js";

const ASK_DELAY_MS = 400;
const key = (s) => `${s.start} ${s.end} ${s.label}`;

// Pins with the said lists brought in line with a change the annotator made from `before`
// to `after`: new or relabelled brackets and changed tags are theirs now, brackets gone from
// a span are forbidden there, and nothing said stays that the tree no longer agrees with.
export function withSaid(before, after, pins) {
  const old = new Set(T.spansOf(before).slice(1).map(key));
  const now = T.spansOf(after).slice(1);
  const nowKeys = new Set(now.map(key));
  const nowSpans = new Set(now.map((s) => `${s.start} ${s.end}`));
  const edited = (pins.edited_spans || []).filter((p) => nowKeys.has(`${p[0]} ${p[1]} ${p[2]}`));
  for (const s of now) {
    if (!old.has(key(s)) && !edited.some((p) => key({start: p[0], end: p[1], label: p[2]}) === key(s))) {
      edited.push([s.start, s.end, s.label]);
    }
  }
  const removed = (pins.removed_spans || []).filter((p) => !nowSpans.has(`${p[0]} ${p[1]}`));
  for (const s of T.spansOf(before).slice(1)) {
    const span = `${s.start} ${s.end}`;
    if (!nowSpans.has(span) && !removed.some((p) => `${p[0]} ${p[1]}` === span)) {
      removed.push([s.start, s.end]);
    }
  }
  const tagsBefore = T.tagsOf(before);
  const tagsAfter = T.tagsOf(after);
  const retagged = (pins.edited_tags || []).filter((p) => tagsAfter[p[0]] === p[1]);
  tagsAfter.forEach((t, i) => {
    if (t !== tagsBefore[i] && !retagged.some((p) => p[0] === i)) retagged.push([i, t]);
  });
  return {...pins, edited_spans: edited, edited_tags: retagged, removed_spans: removed};
}

// Pins with the said lists cut to what `tree` still agrees with (after a re-parse, a reading
// or an undo, which the annotator did not say anything new in).
export function keepSaid(pins, tree) {
  return withSaid(tree, tree, pins);
}

export function isEdited(s) {
  return (S.pins.edited_spans || []).some((p) => p[0] === s.start && p[1] === s.end &&
    p[2] === s.label);
}

export function isRetagged(i) {
  return (S.pins.edited_tags || []).some((p) => p[0] === i);
}

function saidCount() {
  const p = S.pins;
  return p.spans.length + p.tags.length + (p.edited_spans || []).length +
    (p.edited_tags || []).length + (p.removed_spans || []).length;
}

let timer = null;
let asked = 0;

// Ask the grammar again soon (after an edit); quiet: no message unless it offers something.
export function askSoon() {
  if (!S.data || !S.data.suggestion || !S.editable) return;
  clearTimeout(timer);
  timer = setTimeout(() => { ask(false); }, ASK_DELAY_MS);
}

// Re-parse around everything said. `apply`: the annotator asked (g); a plausible answer is
// taken at once, an implausible one is only offered.
export async function ask(apply) {
  const mine = ++asked;
  const text = T.writeTree(S.tree);
  const r = await api("POST", `/api/bench/${sentenceId}/reparse`, {pins: S.pins, k: 3, tree: text});
  if (mine !== asked || T.writeTree(S.tree) !== text) return null;  // the tree moved on
  if (r.status !== 200) {
    if (apply) say(`Re-parse refused: ${errorText(r.body)}`, "warn");
    return null;
  }
  const body = r.body;
  S.posteriors = new Map(body.posteriors.map(([l, a, b, p]) => [`${l} ${a} ${b}`, p]));
  S.tagPosteriors = body.tag_posteriors;
  S.offer = body.changes && body.changes.count > 0 ? body : null;
  if (apply && S.offer && body.plausible) {
    take();
    return body;
  }
  showOffer(apply);
  render();
  return body;
}

// Take the offered re-parse (g when one is offered).
export function take() {
  const body = S.offer;
  if (!body) return false;
  S.offer = null;
  const tree = T.readTree(body.trees[0]);
  commit(tree, keepSaid(S.pins, tree), "reparse", {kind: "phrase", index: 0});
  say(`${body.summary} Taken${body.plausible ? "" : " although implausible"}.`);
  showOffer(false);
  return true;
}

export function showOffer(asked) {
  const box = $("regrow-offer");
  if (!box) return;
  const body = S.offer;
  if (!body) {
    box.hidden = true;
    if (asked) say(`Re-parsed around ${saidCount()} things you said: nothing would change.`);
    return;
  }
  box.hidden = false;
  box.dataset.plausible = body.plausible ? "1" : "0";
  if (asked) say("Re-parsed: the result is implausible, so your tree stays as it is; what it " +
    "would change is shown above (g takes it anyway).", "warn");
  $("regrow-offer-text").textContent = body.summary +
    (body.plausible ? "" : " Not applied: " + body.reasons.join(" ")) +
    (body.plausible && body.reasons.length ? " " + body.reasons.join(" ") : "");
}

// Bring the said lists of the pins a page opened with (or a draft) to the tree's agreement.
export function loadSaid(pins, tree) {
  return keepSaid({spans: pins.spans || [], tags: pins.tags || [],
    edited_spans: pins.edited_spans || [], edited_tags: pins.edited_tags || [],
    removed_spans: pins.removed_spans || []}, tree);
}
