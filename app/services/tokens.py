"""Token fixes from the Bench: split a token, join two, or correct a spelling.

What it does
    :func:`fix_tokens` replaces ``count`` tokens (1 or 2) at ``position`` by new ones: one
    token by several (a split), one by one (a respelling), two by one (a join). The sentence's
    tokens become a new version: the old ones are kept in :class:`TokenVersion` with the
    change, and ``Sentence.token_version`` counts up. The fixing annotator's tree is carried
    over (:func:`carry_tree`: a split token's tag goes to every piece, joined tokens keep the
    left token's tag, a respelt token keeps its tag) and saved as a new revision (source
    ``tokens``); pins that touch the changed words are released, the others shifted. The
    sentence's cached suggestions are dropped (they were parsed from the old words).

    Other annotators' work is not touched: their revisions stay on the tokens they were made
    on (``Revision.token_version``). A handed-in annotation on earlier tokens goes back to
    draft, since it no longer describes the sentence; when its annotator opens the Bench,
    their tree is carried over through the changes since (:func:`carry_through`) and saved as
    a new revision. Agreement is only computed between trees on the sentence's current tokens
    (:func:`app.services.agreement.submitted_trees`).

Complexity: linear in the length of the sentence and the size of the tree.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, cast

from nltk import Tree
from sqlalchemy import CursorResult, delete, select, update
from sqlalchemy.orm import Session

from app.models import (
    ANN_DRAFT,
    ANN_SUBMITTED,
    SENT_GOLD,
    SENT_IN_REVIEW,
    Annotation,
    Revision,
    Sentence,
    Suggestion,
    TokenVersion,
    User,
    utcnow,
)
from app.services.errors import BadInput, Conflict
from app.services.gold import current_revision
from app.services.validation import validate_actions
from parser.trees import escape_word, read_tree, write_tree

MAX_PIECES = 2  # a split makes two tokens (split again for more), so a join undoes it


@dataclass(frozen=True)
class TokenChange:
    """The ``count`` tokens from ``position`` replaced by ``tokens``."""

    position: int
    count: int
    tokens: tuple[str, ...]

    def as_json(self) -> dict[str, Any]:
        return {"position": self.position, "count": self.count, "tokens": list(self.tokens)}

    @classmethod
    def from_json(cls, data: dict[str, Any]) -> TokenChange:
        return cls(int(data["position"]), int(data["count"]), tuple(data["tokens"]))

    def apply(self, tokens: list[str]) -> list[str]:
        return [*tokens[: self.position], *self.tokens, *tokens[self.position + self.count :]]

    def inverse(self, old_tokens: list[str]) -> TokenChange:
        """The change that takes the new tokens back to ``old_tokens``."""
        return TokenChange(
            self.position,
            len(self.tokens),
            tuple(old_tokens[self.position : self.position + self.count]),
        )


def check_change(tokens: list[str], change: TokenChange) -> None:
    """Refuse a change that is not a split, a join of two or a respelling, saying why."""
    n = len(tokens)
    if not 0 <= change.position < n:
        raise BadInput(
            f"no token {change.position + 1}: the sentence has {n}",
            kind="tokens",
            position=change.position,
        )
    if change.count not in (1, 2) or change.position + change.count > n:
        raise BadInput(
            "a fix replaces one token, or two neighbours (a join)",
            kind="tokens",
            position=change.position,
        )
    if not change.tokens or len(change.tokens) > MAX_PIECES:
        raise BadInput(
            f"a token becomes one or {MAX_PIECES} tokens", kind="tokens", position=change.position
        )
    if change.count == 2 and len(change.tokens) != 1:
        raise BadInput(
            "two tokens can only be joined into one", kind="tokens", position=change.position
        )
    for piece in change.tokens:
        if not piece or any(ch.isspace() for ch in piece):
            raise BadInput(
                f"'{piece}' cannot be a token: empty or with a space inside",
                kind="tokens",
                position=change.position,
            )
    if list(change.tokens) == tokens[change.position : change.position + change.count]:
        raise BadInput("the tokens are the same as before", kind="tokens", position=change.position)


def _preterminals(tree: Tree) -> list[tuple[int, ...]]:
    return [pos[:-1] for pos in tree.treepositions("leaves")]


def carry_tree(tree: Tree, change: TokenChange) -> Tree:
    """A copy of ``tree`` on the changed tokens: every piece of a split token under the
    token's tag, joined tokens in the left token's place with its tag (a phrase left empty by
    the right one goes too), a respelt token with its tag."""
    out = tree.copy(deep=True)
    where = _preterminals(out)
    left = where[change.position]
    tag = out[left].label()
    parent = out[left[:-1]] if left[:-1] else out
    index = left[-1]
    if change.count == 2:
        right = where[change.position + 1]
        del out[right]
        up = right[:-1]
        while up and len(out[up]) == 0:
            del out[up]
            up = up[:-1]
    parent[index : index + 1] = [Tree(tag, [escape_word(t)]) for t in change.tokens]
    return out


def carry_pins(pins: dict[str, Any], change: TokenChange) -> dict[str, Any]:
    """Pins away from the changed words, shifted to the new positions; the others released."""
    a, b = change.position, change.position + change.count
    shift = len(change.tokens) - change.count
    spans = []
    for s, e, label in pins.get("spans", []):
        if e <= a:
            spans.append([s, e, label])
        elif s >= b:
            spans.append([s + shift, e + shift, label])
        elif s <= a and b <= e:
            spans.append([s, e + shift, label])
    tags = [[i if i < a else i + shift, t] for i, t in pins.get("tags", []) if not a <= i < b]
    return {"spans": spans, "tags": tags}


def carry_through(db: Session, sentence: Sentence, tree_text: str, since: int) -> str:
    """A tree made on token version ``since`` carried over every change up to the current."""
    tree = read_tree(tree_text)
    versions = db.scalars(
        select(TokenVersion)
        .where(TokenVersion.sentence_id == sentence.id, TokenVersion.number >= since)
        .order_by(TokenVersion.number)
    )
    for version in versions:
        tree = carry_tree(tree, TokenChange.from_json(version.change))
    return write_tree(tree)


@dataclass
class TokenFix:
    annotation: Annotation
    revision: Revision
    inverse: TokenChange


def fix_tokens(
    db: Session,
    user: User,
    sentence: Sentence,
    *,
    base: int,
    change: TokenChange,
    active_seconds: float = 0.0,
    actions: dict[str, int] | None = None,
) -> TokenFix:
    """Apply ``change`` to the sentence's tokens as a new version and carry ``user``'s tree
    over as a new revision (``base`` must be their head). The revision records the page's
    active seconds and edit actions since its last save (``actions``) with the fix itself
    counted as one ``tokens`` action, so the effort figures see the fix when it is made.
    Commits."""
    counted = validate_actions(actions)
    counted["tokens"] = counted.get("tokens", 0) + 1
    if sentence.state in (SENT_IN_REVIEW, SENT_GOLD):
        raise Conflict(
            f"this sentence is {sentence.state.replace('_', ' ')}: its tokens are settled",
            kind="state",
        )
    old = [str(t) for t in sentence.tokens]
    check_change(old, change)
    annotation = db.scalar(
        select(Annotation).where(
            Annotation.sentence_id == sentence.id, Annotation.user_id == user.id
        )
    )
    if annotation is None or annotation.head == 0:
        raise BadInput("save a tree first: the fix carries your tree over", kind="state")
    if annotation.state == ANN_SUBMITTED:
        raise Conflict("this annotation is handed in and takes no more changes", kind="state")
    if base != annotation.head:
        raise Conflict(
            f"fix based on revision {base}, but the newest is revision {annotation.head}",
            head=annotation.head,
        )
    head = current_revision(db, annotation)
    if head is None or head.token_version != sentence.token_version:
        raise Conflict(
            "your tree is on earlier tokens: open the sentence again", head=annotation.head
        )
    tree = carry_tree(read_tree(head.tree), change)
    pins = carry_pins(head.pins or {}, change)
    now = utcnow()
    db.add(
        TokenVersion(
            sentence_id=sentence.id,
            number=sentence.token_version,
            tokens=old,
            text=sentence.text,
            change=change.as_json(),
            user_id=user.id,
            created_at=now,
        )
    )
    new_tokens = change.apply(old)
    sentence.tokens = new_tokens
    sentence.text = " ".join(new_tokens)
    sentence.token_version += 1
    moved = db.execute(
        update(Annotation)
        .where(Annotation.id == annotation.id, Annotation.head == base)
        .values(head=base + 1, updated_at=now)
        .execution_options(synchronize_session=False)
    )
    if cast(CursorResult[Any], moved).rowcount != 1:
        db.rollback()
        raise Conflict("another save of this annotation came first", head=annotation.head)
    revision = Revision(
        annotation_id=annotation.id,
        number=base + 1,
        tree=write_tree(tree),
        pins=pins,
        source="tokens",
        user_id=user.id,
        created_at=now,
        token_version=sentence.token_version,
        active_seconds=float(active_seconds),
        actions=counted,
    )
    db.add(revision)
    db.execute(delete(Suggestion).where(Suggestion.sentence_id == sentence.id))
    # handed-in trees on the old tokens no longer describe the sentence: back to draft
    db.execute(
        update(Annotation)
        .where(
            Annotation.sentence_id == sentence.id,
            Annotation.id != annotation.id,
            Annotation.state == ANN_SUBMITTED,
        )
        .values(state=ANN_DRAFT, submitted_at=None)
        .execution_options(synchronize_session=False)
    )
    db.commit()
    db.refresh(annotation)
    return TokenFix(annotation=annotation, revision=revision, inverse=change.inverse(old))
