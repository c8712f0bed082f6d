"""Export gold trees as bracketed text, whole or split into train / dev / test.

The export holds the current gold tree (the newest one not retired) of every gold sentence of
a corpus, or of one document, in document order then sentence order, one tree per line.
Function tags and indices are kept, or stripped (``NP-SBJ-1`` -> ``NP``; labels that start
with ``-`` such as ``-LRB-`` stay whole).

Splits are deterministic: the same gold, ratios and seed give the same files byte for byte.

``by="sentence"``
    The gold sentences are shuffled with ``random.Random(seed)`` and cut by the ratios; part
    sizes are the ratios times the count, rounded by largest remainder (so they add up and
    each is within one of its exact share).
``by="document"``
    Documents stay whole. They are shuffled with the seed, then each goes, in that order, to
    the part furthest below its target share of sentences. With few documents the shares can
    only be approximate; :class:`ExportResult` reports the actual counts.

Inside each part the trees keep corpus order. A part whose ratio is 0 gets no file.

A split that leaves a part empty (a part with a ratio above 0 but no tree: too few documents
kept whole, or too few sentences) is reported in ``ExportResult.empty_parts`` with a warning,
and :func:`split_advice` says how to get a non-empty split from the same gold: the same ratios
without keeping documents whole, or the nearest seed that works with documents kept whole.
The CLI prints the warning and the advice; the Transfer page shows them instead of
downloading, with a link for each way out and one to download the split as it is.

Cost: O(gold trees) rows loaded and written once; stripping function tags copies each tree.
"""

from __future__ import annotations

import io
import math
import random
import re
import zipfile
from dataclasses import dataclass, field

from sqlalchemy import select
from sqlalchemy.orm import Session

from app.models import SENT_GOLD, Corpus, Document, Event, Gold, Sentence, User
from app.services.corpora import get_corpus
from app.services.errors import BadInput, NotFound
from app.services.transactions import unit_of_work
from app.wording import plural
from parser.errors import ParserError
from parser.trees import read_tree, strip_function_tags, write_tree

PART_NAMES = ("train", "dev", "test")
SPLIT_MODES = ("document", "sentence")


@dataclass(frozen=True)
class SplitSpec:
    """Ratios for train, dev and test (any non-negative numbers, normalised), a seed, a mode."""

    ratios: tuple[float, float, float] = (0.8, 0.1, 0.1)
    seed: int = 0
    by: str = "document"

    def __post_init__(self) -> None:
        if len(self.ratios) != 3:
            raise BadInput(f"give three ratios (train, dev, test), not {len(self.ratios)}")
        if not all(math.isfinite(r) for r in self.ratios):
            raise BadInput(f"ratios must be finite numbers, not {self.ratios}")
        if any(r < 0 for r in self.ratios) or sum(self.ratios) <= 0:
            raise BadInput(f"ratios must be non-negative and not all zero: {self.ratios}")
        if self.by not in SPLIT_MODES:
            raise BadInput(f"split by {self.by!r}? one of {', '.join(SPLIT_MODES)}")

    @property
    def shares(self) -> tuple[float, ...]:
        total = sum(self.ratios)
        return tuple(r / total for r in self.ratios)


def parse_ratios(text: str) -> tuple[float, float, float]:
    """``"0.8,0.1,0.1"``, ``"80/10/10"`` or ``"8:1:1"`` as three numbers."""
    parts = [p for p in re.split(r"[\s,/:]+", (text or "").strip()) if p]
    if len(parts) != 3:
        raise BadInput(
            f"ratios {text!r}: give three numbers for train, dev and test, e.g. 80/10/10"
        )
    try:
        a, b, c = (float(p) for p in parts)
    except ValueError:
        raise BadInput(f"ratios {text!r}: {', '.join(parts)} are not all numbers") from None
    return a, b, c


@dataclass
class GoldItem:
    sentence_id: int
    document_id: int
    document_name: str
    tree: str


@dataclass(frozen=True)
class SplitAdvice:
    """Another split of the same gold with no empty part, and its part sizes."""

    spec: SplitSpec
    sizes: tuple[int, int, int]

    def describe(self, cli: bool = True) -> str:
        """The way out in words; ``cli`` names the command line's options, else the page's."""
        if self.spec.by == "sentence":
            what = "keep nothing together" + (" (--by sentence)" if cli else " (shuffle sentences)")
        else:
            what = (
                f"seed {self.spec.seed}"
                + (f" (--seed {self.spec.seed})" if cli else "")
                + ", documents kept whole"
            )
        return f"{what}: train {self.sizes[0]}, dev {self.sizes[1]}, test {self.sizes[2]}"


@dataclass
class ExportResult:
    """File name -> text, plus how many trees went into each file."""

    files: dict[str, str] = field(default_factory=dict)
    counts: dict[str, int] = field(default_factory=dict)
    warnings: list[str] = field(default_factory=list)
    #: Parts (train, dev, test) with a ratio above 0 that came out empty.
    empty_parts: list[str] = field(default_factory=list)
    #: With empty parts: which, and why, in words.
    empty_message: str = ""
    #: With empty parts: other splits of the same gold that leave no part empty.
    advice: list[SplitAdvice] = field(default_factory=list)

    def zip_bytes(self) -> bytes:
        """The files as one zip archive (fixed timestamps, so equal exports give equal bytes)."""
        buffer = io.BytesIO()
        with zipfile.ZipFile(buffer, "w", compression=zipfile.ZIP_DEFLATED) as archive:
            for name, text in self.files.items():
                info = zipfile.ZipInfo(name, date_time=(2000, 1, 1, 0, 0, 0))
                info.compress_type = zipfile.ZIP_DEFLATED
                archive.writestr(info, text.encode("utf-8"))
        return buffer.getvalue()


def slug(name: str) -> str:
    """A file-name-safe form of a corpus or document name."""
    out = re.sub(r"[^A-Za-z0-9]+", "-", name).strip("-").lower()
    return out or "corpus"


def gold_items(db: Session, corpus: Corpus, document_id: int | None = None) -> list[GoldItem]:
    """Current gold of the corpus (or one document) in document, then sentence order."""
    where = [
        Sentence.corpus_id == corpus.id,
        Sentence.state == SENT_GOLD,
        Gold.retired_at.is_(None),
    ]
    if document_id is not None:
        if (
            db.scalar(
                select(Document.id).where(
                    Document.id == document_id, Document.corpus_id == corpus.id
                )
            )
            is None
        ):
            raise NotFound(f"no document with id {document_id} in corpus {corpus.name!r}")
        where.append(Sentence.document_id == document_id)
    rows = db.execute(
        select(Sentence.id, Document.id, Document.name, Gold.tree, Gold.id)
        .join(Document, Document.id == Sentence.document_id)
        .join(Gold, Gold.sentence_id == Sentence.id)
        .where(*where)
        .order_by(Document.position, Document.id, Sentence.position, Gold.id)
    )
    latest: dict[int, GoldItem] = {}
    for sid, did, dname, tree, _gid in rows:
        latest[sid] = GoldItem(sid, did, dname, tree)  # the newest gold row wins
    return list(latest.values())


def _stripped(item: GoldItem) -> str:
    try:
        return write_tree(strip_function_tags(read_tree(item.tree)))
    except ParserError as err:  # stored before the reader's depth limit (parser.trees)
        raise BadInput(
            f"the gold tree of sentence {item.sentence_id} cannot be exported "
            f"without function tags: {err}; reopen it and settle a shallower "
            "tree, or export with function tags",
            kind="tree",
            sentence_id=item.sentence_id,
        ) from err


def _render(items: list[GoldItem], function_tags: bool) -> str:
    if function_tags:
        lines = [item.tree for item in items]
    else:
        lines = [_stripped(item) for item in items]
    return "".join(line + "\n" for line in lines)


def _largest_remainder(total: int, shares: tuple[float, ...]) -> list[int]:
    exact = [total * s for s in shares]
    sizes = [int(x) for x in exact]
    order = sorted(range(len(shares)), key=lambda i: (-(exact[i] - sizes[i]), i))
    for i in order[: total - sum(sizes)]:
        sizes[i] += 1
    return sizes


def split_items(items: list[GoldItem], spec: SplitSpec) -> list[list[GoldItem]]:
    """The items of each part (train, dev, test), each in corpus order."""
    rng = random.Random(spec.seed)
    position = {item.sentence_id: i for i, item in enumerate(items)}
    parts: list[list[GoldItem]] = [[], [], []]
    if spec.by == "sentence":
        shuffled = list(items)
        rng.shuffle(shuffled)
        start = 0
        for part, size in enumerate(_largest_remainder(len(items), spec.shares)):
            parts[part] = shuffled[start : start + size]
            start += size
    else:
        documents: dict[int, list[GoldItem]] = {}
        for item in items:
            documents.setdefault(item.document_id, []).append(item)
        order = list(documents)
        rng.shuffle(order)
        targets = [len(items) * s for s in spec.shares]
        filled = [0, 0, 0]
        for doc_id in order:
            # the part with the largest shortfall; ties go to the earlier part
            part = max(
                range(3),
                key=lambda i: (
                    (targets[i] - filled[i], -i) if spec.shares[i] > 0 else (float("-inf"), -i)
                ),
            )
            parts[part].extend(documents[doc_id])
            filled[part] += len(documents[doc_id])
    return [sorted(p, key=lambda item: position[item.sentence_id]) for p in parts]


def _sizes(items: list[GoldItem], spec: SplitSpec) -> tuple[int, int, int]:
    a, b, c = (len(p) for p in split_items(items, spec))
    return a, b, c


def _none_empty(sizes: tuple[int, int, int], spec: SplitSpec) -> bool:
    return all(n > 0 for n, share in zip(sizes, spec.shares, strict=True) if share > 0)


#: How many seeds after the chosen one :func:`split_advice` tries with documents kept whole.
ADVICE_SEEDS = 200


def split_advice(items: list[GoldItem], spec: SplitSpec) -> list[SplitAdvice]:
    """Splits of ``items`` that leave no part empty, nearest to ``spec`` first: the same
    ratios and seed by sentence, then the first of the next ADVICE_SEEDS seeds that works with
    documents kept whole. Empty when there are fewer trees than parts."""
    out: list[SplitAdvice] = []
    if spec.by == "document":
        documents = len({item.document_id for item in items})
        needed = sum(1 for share in spec.shares if share > 0)
        if documents >= needed:
            for seed in range(spec.seed + 1, spec.seed + 1 + ADVICE_SEEDS):
                other = SplitSpec(spec.ratios, seed=seed, by="document")
                sizes = _sizes(items, other)
                if _none_empty(sizes, other):
                    out.append(SplitAdvice(other, sizes))
                    break
    by_sentence = SplitSpec(spec.ratios, seed=spec.seed, by="sentence")
    sizes = _sizes(items, by_sentence)
    if _none_empty(sizes, by_sentence) and by_sentence != spec:
        out.insert(0, SplitAdvice(by_sentence, sizes))
    return out


def export_gold(
    db: Session,
    corpus_id: int,
    *,
    document_id: int | None = None,
    function_tags: bool = True,
    split: SplitSpec | None = None,
) -> ExportResult:
    """Gold of a corpus (or document) as bracketed text files.

    Without ``split`` one file ``<corpus>[-<document>].ptb``; with it one file per part whose
    ratio is above zero, ``<corpus>-train.ptb`` and so on.
    """
    corpus = get_corpus(db, corpus_id)
    items = gold_items(db, corpus, document_id)
    result = ExportResult()
    base = slug(corpus.name)
    if document_id is not None and items:
        base += "-" + slug(items[0].document_name)
    elif document_id is not None:
        doc = db.get(Document, document_id)
        base += "-" + slug(doc.name if doc else str(document_id))
    if not items:
        result.warnings.append("there is no gold yet: the export is empty")
    if split is None:
        result.files[f"{base}.ptb"] = _render(items, function_tags)
        result.counts[f"{base}.ptb"] = len(items)
        return result
    for name, share, part in zip(PART_NAMES, split.shares, split_items(items, split), strict=True):
        if share <= 0:
            continue
        file_name = f"{base}-{name}.ptb"
        result.files[file_name] = _render(part, function_tags)
        result.counts[file_name] = len(part)
        if not part and items:
            result.empty_parts.append(name)
    if result.empty_parts:
        documents = len({item.document_id for item in items})
        kept = (
            f"{plural(len(items), 'gold tree')} in {plural(documents, 'document')} kept whole"
            if split.by == "document"
            else plural(len(items), "gold tree")
        )
        result.empty_message = (
            f"the {' and '.join(result.empty_parts)} "
            f"{'part is' if len(result.empty_parts) == 1 else 'parts are'} empty: {kept} "
            f"cannot fill {'/'.join(f'{r:g}' for r in split.ratios)}"
        )
        result.warnings.append(result.empty_message)
        result.advice = split_advice(items, split)
        if result.advice:
            result.warnings.append(
                "for a split with no empty part: "
                + "; or ".join(a.describe() for a in result.advice)
            )
        else:
            result.warnings.append(
                "no split of so few gold trees fills every part: settle "
                "more gold, or set a ratio to 0"
            )
    return result


@unit_of_work
def record_export(
    db: Session,
    corpus_id: int,
    result: ExportResult,
    *,
    user: User | None,
    document_id: int | None = None,
    split: SplitSpec | None = None,
    function_tags: bool = True,
) -> None:
    """Note an export in the event log (gold text leaving the service); Commits."""
    detail: dict[str, object] = {
        "files": dict(result.counts),
        "function_tags": function_tags,
        "document_id": document_id,
    }
    if split is not None:
        detail["split"] = {"ratios": list(split.ratios), "seed": split.seed, "by": split.by}
    db.add(
        Event(user_id=user.id if user else None, kind="export", corpus_id=corpus_id, detail=detail)
    )
