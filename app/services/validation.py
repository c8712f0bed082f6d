"""Tree validation: whether a bracketed tree fits a sentence and its corpus.

What it checks
    :func:`validate_tree_text` reads the bracketed text with :func:`parser.trees.read_tree`,
    checks its words against the sentence's tokens (in stored form, see :func:`stored_words`)
    and its labels and tags against the corpus's label and tag sets (policy ``refuse`` or
    ``confirm``), and raises :class:`BadInput` saying what is wrong and where.
    :func:`validate_pins` checks the constituents and tags an annotator pinned against the
    tree. The Bench's saves, the Review's settle and its check all use these functions.

Cost: linear in the length of the text plus the number of constituents; no database access.
"""

from __future__ import annotations

from typing import Any

from nltk import Tree

from app.corpus_settings import LabelPolicy
from app.models import ACTION_KINDS, Corpus, Sentence
from app.services.errors import BadInput
from parser.errors import BracketSyntaxError
from parser.trees import (
    UNKNOWN_TAG,
    constituents,
    escape_word,
    is_preterminal,
    pos_tags,
    read_tree,
    words,
)

#: Longest bracketed text accepted for one sentence's tree.
MAX_TREE_CHARS = 200_000


def stored_words(sentence: Sentence) -> list[str]:
    """The sentence's tokens in the form a stored tree carries them (``(`` as ``-LRB-``)."""
    return [escape_word(str(t)) for t in sentence.tokens]


def unknown_labels(tree: Tree, corpus: Corpus) -> list[str]:
    """Labels and tags of ``tree`` outside the corpus's sets, sorted; the root label and the
    placeholder tag of a flat tree are always allowed. An empty set allows everything."""
    label_set = set(corpus.label_set or [])
    tag_set = set(corpus.tag_set or [])
    found: set[str] = set()
    if label_set:
        for label, _, _ in constituents(tree)[1:]:
            if label not in label_set:
                found.add(label)
    if tag_set:
        for tag in pos_tags(tree):
            if tag != UNKNOWN_TAG and tag not in tag_set:
                found.add(tag)
    return sorted(found)


def validate_tree_text(
    sentence: Sentence, text: str, corpus: Corpus, confirm_labels: bool = False
) -> Tree:
    """Read ``text`` as the tree of ``sentence`` or raise BadInput saying what and where.

    The error's extra fields (merged into the JSON answer) carry ``kind``: ``"brackets"`` with
    ``line``/``column``; ``"shape"``; ``"words"`` with ``position`` (0-based), ``expected`` and
    ``found``; ``"labels"`` with ``labels`` and ``can_confirm`` (policy ``confirm`` and the
    request did not say ``confirm_labels``: resend with it to accept them).
    """
    if len(text) > MAX_TREE_CHARS:
        raise BadInput(
            f"tree text is {len(text)} characters long; the limit is {MAX_TREE_CHARS}", kind="shape"
        )
    if not text.strip():
        raise BadInput("tree text is empty", kind="shape")
    try:
        tree = read_tree(text)
    except BracketSyntaxError as exc:
        raise BadInput(
            f"line {exc.line}, column {exc.column}: {exc.message}",
            kind="brackets",
            line=exc.line,
            column=exc.column,
        ) from exc
    if is_preterminal(tree):
        raise BadInput(
            "the tree needs a constituent above the POS tags, e.g. (ROOT (NN word))", kind="shape"
        )
    expected = stored_words(sentence)
    found = words(tree)
    for i in range(max(len(expected), len(found))):
        want = expected[i] if i < len(expected) else None
        got = escape_word(found[i]) if i < len(found) else None
        if want != got:
            if got is None:
                msg = f"the tree ends after word {i} but the sentence goes on with {want!r}"
            elif want is None:
                msg = f"word {i + 1} {got!r} is extra: the sentence has {len(expected)} words"
            else:
                msg = f"word {i + 1} is {got!r} but the sentence has {want!r} there"
            raise BadInput(msg, kind="words", position=i, expected=want, found=got)
    unknown = unknown_labels(tree, corpus)
    if unknown:
        policy = corpus.options.unknown_label_policy
        names = ", ".join(unknown)
        if policy == LabelPolicy.REFUSE:
            raise BadInput(
                f"not in this corpus's label or tag set: {names}",
                kind="labels",
                labels=unknown,
                can_confirm=False,
            )
        if not confirm_labels:
            raise BadInput(
                f"not in this corpus's label or tag set: {names}; confirm to use them anyway",
                kind="labels",
                labels=unknown,
                can_confirm=True,
            )
    return tree


def validate_pins(tree: Tree, pins: dict[str, Any]) -> dict[str, Any]:
    """Check that every pinned span is a constituent of ``tree`` with that label and every pinned
    tag is the tree's tag at that word; return the pins in canonical (sorted) form.

    The annotator's other statements (``edited_spans``, ``edited_tags``, ``removed_spans``: see
    :class:`app.schemas.annotation.Pins`) are kept only where the tree still agrees with them
    (an edited bracket later removed is no longer said), and only when there are any."""
    spans_in = pins.get("spans") or []
    tags_in = pins.get("tags") or []
    have = {(s, e, lab) for lab, s, e in constituents(tree)}
    tags = pos_tags(tree)
    spans_out: list[list[Any]] = []
    for item in spans_in:
        s, e, label = int(item[0]), int(item[1]), str(item[2])
        if (s, e, label) not in have:
            raise BadInput(
                f"pinned constituent {label} over words {s + 1}..{e} is not in the tree",
                kind="pins",
            )
        spans_out.append([s, e, label])
    tags_out: list[list[Any]] = []
    for item in tags_in:
        i, tag = int(item[0]), str(item[1])
        if not 0 <= i < len(tags) or tags[i] != tag:
            raise BadInput(f"pinned tag {tag} at word {i + 1} is not in the tree", kind="pins")
        tags_out.append([i, tag])
    spans_out.sort(key=lambda x: (x[0], -x[1], x[2]))
    tags_out.sort()
    out: dict[str, Any] = {"spans": _unique(spans_out), "tags": _unique(tags_out)}
    bracketed = {(s, e) for s, e, _ in have}
    edited_items = [(int(a), int(b), str(c)) for a, b, c in pins.get("edited_spans") or []]
    edited = [
        list(x)
        for x in sorted((x for x in edited_items if x in have), key=lambda x: (x[0], -x[1], x[2]))
    ]
    retagged = sorted(
        [int(i), str(t)]
        for i, t in pins.get("edited_tags") or []
        if 0 <= int(i) < len(tags) and tags[int(i)] == str(t)
    )
    removed = sorted(
        [int(a), int(b)]
        for a, b in pins.get("removed_spans") or []
        if (int(a), int(b)) not in bracketed
    )
    for key, items in (
        ("edited_spans", edited),
        ("edited_tags", retagged),
        ("removed_spans", removed),
    ):
        if items:
            out[key] = _unique(items)
    return out


def _unique(items: list[list[Any]]) -> list[list[Any]]:
    out: list[list[Any]] = []
    for x in items:
        if not out or out[-1] != x:
            out.append(x)
    return out


def validate_actions(actions: dict[str, int] | None) -> dict[str, int]:
    """The Bench's edit counts by kind, checked (known kinds, counts 0..100,000), zeros left
    out."""
    out: dict[str, int] = {}
    for kind, n in (actions or {}).items():
        if kind not in ACTION_KINDS or not isinstance(n, int) or not 0 <= n <= 100_000:
            raise BadInput(
                f"action count {kind!r}: {n!r} is not a known kind with a count "
                f"(kinds: {', '.join(ACTION_KINDS)})",
                kind="shape",
            )
        if n:
            out[kind] = n
    return out
