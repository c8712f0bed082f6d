// bench/loop.js: the parser in the loop. Everything the annotator says is kept with the pins:
// brackets they added or relabelled (edited_spans), tags they corrected (edited_tags) and
// brackets they removed (removed_spans). The grammar is asked again after each edit, around all
// of that: its answer updates the doubt marks (its belief about what nobody has touched yet)
// and, when it would change the tree, is offered with what it would change: the proposal (the
// consensus under what was said) and the k best readings under the same constraints, one shown
// at a time. G (or a reading's button) shows the next one, g (or Take it) takes the one shown,
// as one action; i (or Take inside) takes only what the reading shown has inside the chosen
// constituent (bench/simulate_annotator.py measures what these choices save).

import * as T from "../treemodel.js";
import {api, errorText} from "./api.js";
import {render} from "./draw.js";
import {commit} from "./saving.js";
import {$, S, sentenceId} from "./state.js";
import {say} from "./status.js";

const ASK_DELAY_MS = 400;
// Readings asked for beside the proposal: bench/simulate_annotator.py measured the loop
// against plain editing offering 0, 5, 10 and 30 (fewest actions with 30).
export const OFFER_K = 30;
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
  const r = await api("POST", `/api/bench/${sentenceId}/reparse`,
    {pins: S.pins, k: OFFER_K, tree: text});
  if (mine !== asked || T.writeTree(S.tree) !== text) return null;  // the tree moved on
  if (r.status !== 200) {
    if (apply) say(`Re-parse refused: ${errorText(r.body)}`, "warn");
    return null;
  }
  const body = r.body;
  $("bench").dataset.answered = String(mine);  // answers so far (tests wait on it)
  S.posteriors = new Map(body.posteriors.map(([l, a, b, p]) => [`${l} ${a} ${b}`, p]));
  S.tagPosteriors = body.tag_posteriors;
  // the readings are offered from the start too (then they are the grammar's k best, the
  // readings list's 5 and more): bench/simulate_annotator.py measures what that choice before
  // the first edit saves (DEVELOPERS.md)
  S.offer = offerOf(body, text);
  if (apply && S.offer && S.offer.choices[0].proposal && body.plausible) {
    take();
    return body;
  }
  showOffer(apply);
  render();
  return body;
}

// The offer of a re-parse answer: the proposal and the readings that differ from the tree
// (`text`), each with its probability under the constraints and what it would change.
function offerOf(body, text) {
  const probability = new Map(body.readings.map((r) => [r.tree, r.probability]));
  const now = T.readTree(text);
  const choices = body.trees
    .map((t, i) => ({tree: t, proposal: i === 0, probability: probability.get(t)}))
    .filter((c) => c.tree !== text);
  if (!choices.length) return null;
  for (const c of choices) c.changes = describeChanges(now, T.readTree(c.tree));
  return {body, choices, at: 0};
}

// What `after` changes in `before`, in a few words (words numbered from 1).
export function describeChanges(before, after) {
  const key = (s) => `${s.label} ${s.start} ${s.end}`;
  const a = T.spansOf(before).slice(1);
  const b = T.spansOf(after).slice(1);
  const inA = new Set(a.map(key));
  const inB = new Set(b.map(key));
  const gone = a.filter((s) => !inB.has(key(s)));
  const made = b.filter((s) => !inA.has(key(s)));
  const words = (s) => (s.end - s.start === 1 ? `word ${s.start + 1}` : `words ${s.start + 1}-${s.end}`);
  const out = [];
  for (const s of made) {
    const old = gone.findIndex((g) => g.start === s.start && g.end === s.end);
    if (old >= 0) out.push(`${gone.splice(old, 1)[0].label}→${s.label} over ${words(s)}`);
    else out.push(`+${s.label} over ${words(s)}`);
  }
  for (const s of gone) out.push(`−${s.label} over ${words(s)}`);
  const ta = T.tagsOf(before);
  T.tagsOf(after).forEach((t, i) => { if (t !== ta[i]) out.push(`tag of word ${i + 1} ${ta[i]}→${t}`); });
  return out;
}

// Show the offer's next reading (G), or reading `i` (its button).
export function showReading(i = null) {
  if (!S.offer) return false;
  const n = S.offer.choices.length;
  S.offer.at = i === null ? (S.offer.at + 1) % n : Math.max(0, Math.min(n - 1, i));
  showOffer(false);
  return true;
}

// Take the reading of the offered re-parse that is shown (g when one is offered).
export function take() {
  const offer = S.offer;
  if (!offer) return false;
  const choice = offer.choices[offer.at];
  S.offer = null;
  const tree = T.readTree(choice.tree);
  commit(tree, keepSaid(S.pins, tree), "reparse", {kind: "phrase", index: 0});
  say(`${choice.proposal ? offer.body.summary : `Reading ${offer.at + 1} of the offer:`} ` +
    `Taken${offer.body.plausible ? "" : " although implausible"}.`);
  showOffer(false);
  return true;
}

// Take what the reading shown has inside the chosen constituent, keeping the rest of the tree
// (i when one is offered): one action, undone by one undo like any other.
export function takeInside() {
  const offer = S.offer;
  if (!offer) throw new T.EditError("no re-parse is offered now: edit, or ask with g");
  if (!S.sel || S.sel.kind !== "phrase") {
    throw new T.EditError("choose the constituent whose inside to take first");
  }
  const choice = offer.choices[offer.at];
  const s = S.spans[S.sel.index];
  const tree = T.graftInside(S.tree, T.readTree(choice.tree), S.sel.index);
  if (T.writeTree(tree) === T.writeTree(S.tree)) {
    throw new T.EditError(`the reading shown changes nothing inside ${s.label}: G shows the next`);
  }
  const kept = T.pinsKept(S.pins, tree);
  const at = T.spansOf(tree).findIndex((x) => x.start === s.start && x.end === s.end &&
    x.label === s.label);
  commit(tree, keepSaid(kept.pins, tree), "reparse", {kind: "phrase", index: Math.max(at, 0)});
  say(`${choice.proposal ? "The proposal" : `Reading ${offer.at + 1} of the offer`} taken ` +
    `inside ${s.label} over words ${s.start + 1}-${s.end}; the rest stays.` +
    (kept.dropped ? ` ${kept.dropped} pins not in it were released.` : ""));
  return true;
}

function readingName(c, i) {
  const p = c.probability === null || c.probability === undefined ? ""
    : `, P = ${c.probability < 0.001 ? c.probability.toExponential(1) : c.probability.toFixed(3)}`;
  return c.proposal ? `the proposal (consensus under what you said${p})`
    : `reading ${i + 1}, one of the grammar's best under what you said${p}`;
}

export function showOffer(asked) {
  const box = $("regrow-offer");
  if (!box) return;
  const offer = S.offer;
  if (!offer) {
    box.hidden = true;
    if (asked) say(`Re-parsed around ${saidCount()} things you said: nothing would change.`);
    return;
  }
  const {body, choices, at} = offer;
  const c = choices[at];
  box.hidden = false;
  box.dataset.plausible = body.plausible ? "1" : "0";
  box.dataset.tree = c.tree;
  box.dataset.at = String(at);
  if (asked) say("Re-parsed: the result is implausible, so your tree stays as it is; what it " +
    "would change is shown above (g takes it anyway).", "warn");
  const shown = c.changes.slice(0, 6).join(", ") +
    (c.changes.length > 6 ? `, and ${c.changes.length - 6} more` : "");
  $("regrow-offer-text").textContent = (c.proposal ? body.summary + " " : "") +
    `${choices.length > 1 ? `${at + 1} of ${choices.length}: ` : ""}${readingName(c, at)}` +
    ` would change ${c.changes.length}: ${shown}.` +
    (body.plausible ? "" : " Not applied: " + body.reasons.join(" ")) +
    (body.plausible && body.reasons.length ? " " + body.reasons.join(" ") : "");
  const list = $("regrow-readings");
  list.replaceChildren();
  if (choices.length > 1) {
    choices.forEach((ch, i) => {
      const b = document.createElement("button");
      b.type = "button";
      b.textContent = String(i + 1);
      b.title = `Show ${readingName(ch, i)} (${ch.changes.length} changes; G steps through them)`;
      b.setAttribute("aria-pressed", i === at ? "true" : "false");
      b.addEventListener("click", () => showReading(i));
      list.append(b);
    });
  }
}

// Bring the said lists of the pins a page opened with (or a draft) to the tree's agreement.
export function loadSaid(pins, tree) {
  return keepSaid({spans: pins.spans || [], tags: pins.tags || [],
    edited_spans: pins.edited_spans || [], edited_tags: pins.edited_tags || [],
    removed_spans: pins.removed_spans || []}, tree);
}
