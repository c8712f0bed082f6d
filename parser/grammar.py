"""PCFG estimation, the grammar's saved form, and its tightness check.

What it computes
    :func:`train_grammar` cleans and binarizes training trees (:mod:`parser.binarize`), collapses
    each unary chain into one *unary edge*, and estimates every probability by relative frequency.
    The model is a proper PCFG over binarized trees whose unary chains are collapsed; each
    symbol A appears in two roles:

    * **top** A: the node as its parent sees it. It expands by one unary edge
      ``A -> X1 -> ... -> B`` into the bottom of B, or by the *identity edge* ``A -> A`` (no unary
      chain at all). P(edge | A) = count(edge) / count(A as a top node).
    * **bottom** B: the node that does the branching. It expands by a binary rule ``B -> C D``
      (C and D are tops) with P = count(rule) / count(B as a bottom node), or, for POS tags,
      emits a word through the lexicon (:mod:`parser.lexicon`).

    So every left-hand side (top and bottom) is locally normalized, and a chart needs exactly one
    unary layer per span, with no closure and no cycles.

    :meth:`Grammar.from_text` builds a grammar from explicit rules (tests and small examples):
    acyclic unary chains are composed into edges, so the result is the same PCFG.

    :meth:`Grammar.tightness` iterates the partition function Z = F(Z) from Z = 0 (the least
    fixed point), reporting whether each symbol's Z is 1.

Saved form: one deflated ``.npz`` file of numpy arrays plus a JSON metadata blob (stored in the
same file as a uint8 array) carrying ``format_version``; loaded with ``allow_pickle=False``
(files written undeflated before load the same way).

Complexity: training is linear in the number of tree nodes; the lexicon costs O(tags x vocab).
Limits: labels may not contain the annotation characters of :mod:`parser.binarize`.
"""

from __future__ import annotations

import io
import json
import math
import re
import time
from collections import Counter
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
from nltk import Tree

from parser import binarize as bz
from parser.errors import GrammarError
from parser.lexicon import SCHEME, estimate_lexicon, signature_backoff
from parser.trees import escape_word

FORMAT_VERSION = 1
DEFAULT_HORIZONTAL = 2
DEFAULT_VERTICAL = 2
#: POS tags annotated with their parent's label (measured: words-only F1 73.6 vs 72.1 on the
#: GUM split).
DEFAULT_TAG_ANCESTORS = 1
#: Feature annotations of parser.annotate used by default. Measured by bench/accuracy_options.py
#: (GUM split, words only, Viterbi labelled F1, before DEFAULT_MIN_CONTEXT): none 74.25,
#: split-vp 75.28, + unary-internal 76.19; each added alone to those two: in-grandparent
#: 76.91, base-np 77.06, right-rec-np 76.64, tmp-np 76.46, possessive-np 76.36 (unary-dt 76.23,
#: unary-rb 76.11, split-aux 76.10, split-cc 76.04, dominates-verb 76.27: left out); all seven
#: 77.14 (consensus tree 79.60).
DEFAULT_FEATURES: tuple[str, ...] = (
    "split-vp",
    "unary-internal",
    "in-grandparent",
    "base-np",
    "right-rec-np",
    "possessive-np",
    "tmp-np",
)

#: Factoring (bench/accuracy_options.py, GUM split, words only, consensus-tree labelled F1,
#: each with the seven features above): h=1 with annotated intermediates 79.60 (2,023
#: symbols); h=1 plain 79.34 (1,185); h=2 plain 79.85 (2,026); h=3 plain 79.73 (2,685); h=2
#: annotated 79.83 (3,340); head-outward h=1 79.73 (2,809), h=2 plain 79.87 (2,892). So h=2
#: with plain intermediates: as accurate as any, no larger than the former h=1 default.
DEFAULT_HEAD_OUTWARD = False
DEFAULT_PLAIN_INTERMEDIATES = True
#: Variable-order markovization (the variable-history models of Klein and Manning 2003; from
#: memory): a label of the binarized training trees seen fewer than this many times falls back
#: one order (an intermediate node remembers one sibling fewer, a phrase or tag loses its
#: parent annotation); 0 or 1: never.
#: Measured by bench/accuracy_options.py (GUM split, words only, consensus / Viterbi labelled
#: F1; 2,026 symbols without): off 79.85 / 77.27; 3: 80.32 / 77.23; 5: 80.43 / 77.99; 10:
#: 79.80 / 77.78; 25: 79.87 / 77.89. With 5 the grammar has 1,121 symbols and parses the
#: test sentences in about half the time. Two more splits of the 99 files (by name: the
#: first 10 held out; the 46th to 55th held out): 79.60 against 79.45 off, 79.11 against 78.78.
#: (The factoring figures above are without it. With it, h=3 gives 80.09 and v=3 79.49: the
#: orders stay 2 and 2.)
DEFAULT_MIN_CONTEXT = 5

Progress = Callable[[int, int], None]


@dataclass(frozen=True)
class TightnessReport:
    """Whether every symbol's partition function is 1 (to ``tolerance``).

    ``partition`` maps each symbol that has a top role (every symbol a parent can produce) to
    its partition function Z, the total probability of all finite trees it derives.
    """

    tight: bool
    partition: dict[str, float]
    iterations: int


class Grammar:
    """An immutable PCFG in log space (see the module docstring for the model).

    Arrays (N symbols, R binary rules, E unary edges, T lexical symbols, X lexicon columns):
        bin_parent, bin_left, bin_right: int32[R]; bin_logp: float64[R]
        un_parent, un_child, un_chain: int32[E]; un_logp: float64[E]
        lex_symbols: int32[T]; lex_logp: float64[T, X]  (includes the lexical share of B)
    """

    def __init__(
        self,
        *,
        symbols: Sequence[str],
        start: int,
        bin_parent: np.ndarray,
        bin_left: np.ndarray,
        bin_right: np.ndarray,
        bin_logp: np.ndarray,
        un_parent: np.ndarray,
        un_child: np.ndarray,
        un_chain: np.ndarray,
        un_logp: np.ndarray,
        chains: Sequence[Sequence[str]],
        lex_symbols: np.ndarray,
        lex_logp: np.ndarray,
        vocab: Sequence[str],
        signatures: Sequence[str],
        meta: dict[str, Any] | None = None,
    ) -> None:
        self.symbols: tuple[str, ...] = tuple(symbols)
        self.start = int(start)
        self.bin_parent = _frozen(bin_parent, np.int32)
        self.bin_left = _frozen(bin_left, np.int32)
        self.bin_right = _frozen(bin_right, np.int32)
        self.bin_logp = _frozen(bin_logp, np.float64)
        self.un_parent = _frozen(un_parent, np.int32)
        self.un_child = _frozen(un_child, np.int32)
        self.un_chain = _frozen(un_chain, np.int32)
        self.un_logp = _frozen(un_logp, np.float64)
        self.chains: tuple[tuple[str, ...], ...] = tuple(tuple(c) for c in chains)
        self.lex_symbols = _frozen(lex_symbols, np.int32)
        self.lex_logp = _frozen(lex_logp, np.float64)
        self.vocab: tuple[str, ...] = tuple(vocab)
        self.signatures: tuple[str, ...] = tuple(signatures)
        self.meta: dict[str, Any] = dict(meta or {})
        self._validate()
        self._derive()

    # ----------------------------------------------------------------- derived views
    def _validate(self) -> None:
        n = len(self.symbols)
        if not 0 <= self.start < n:
            raise GrammarError(f"start symbol index {self.start} out of range")
        for name, arr in (
            ("bin_parent", self.bin_parent),
            ("bin_left", self.bin_left),
            ("bin_right", self.bin_right),
            ("un_parent", self.un_parent),
            ("un_child", self.un_child),
            ("lex_symbols", self.lex_symbols),
        ):
            if arr.size and (arr.min() < 0 or arr.max() >= n):
                raise GrammarError(f"{name} refers to a symbol outside 0..{n - 1}")
        if self.un_chain.size and (
            self.un_chain.min() < 0 or self.un_chain.max() >= len(self.chains)
        ):
            raise GrammarError("un_chain refers to a chain that does not exist")
        if self.lex_logp.shape != (len(self.lex_symbols), len(self.vocab) + len(self.signatures)):
            raise GrammarError(
                f"lexicon shape {self.lex_logp.shape} does not match "
                f"{len(self.lex_symbols)} tags x "
                f"{len(self.vocab) + len(self.signatures)} columns"
            )

    def _derive(self) -> None:
        n = len(self.symbols)
        self.base: tuple[str, ...] = tuple(bz.base_label(s) for s in self.symbols)
        self.intermediate = np.array([bz.is_intermediate(s) for s in self.symbols], dtype=bool)
        self.intermediate.flags.writeable = False
        lexical = np.zeros(n, dtype=bool)
        lexical[self.lex_symbols] = True
        phrasal = np.zeros(n, dtype=bool)
        phrasal[self.bin_parent] = True
        phrasal[self.un_parent[self.un_child != self.un_parent]] = True
        phrase_labels: set[str] = set()
        for i in np.flatnonzero(phrasal & ~self.intermediate):
            phrase_labels.add(self.base[i])
        for chain in self.chains:
            for lab in chain[:-1] if len(chain) > 1 else ():
                phrase_labels.add(bz.base_label(lab))
        phrase_labels.add(self.base[self.start])
        self.labels: tuple[str, ...] = tuple(sorted(phrase_labels))
        self.tags: tuple[str, ...] = tuple(sorted({self.base[i] for i in self.lex_symbols}))
        self.root_label = self.base[self.start]
        self._vocab_index = {w: i for i, w in enumerate(self.vocab)}
        self._sig_index = {s: len(self.vocab) + i for i, s in enumerate(self.signatures)}
        self.n_symbols = n

    # ----------------------------------------------------------------- lexical scores
    def word_column(self, word: str, first: bool = False) -> int:
        """Lexicon column of ``word``: its own if known, else its finest known signature,
        else -1."""
        col = self._vocab_index.get(word)
        if col is None:
            col = self._vocab_index.get(escape_word(word, all_brackets=True))
        if col is None:
            col = self._vocab_index.get(escape_word(word))
        if col is not None:
            return col
        if self.meta.get("signature_scheme") == SCHEME:
            for sig in signature_backoff(word, first):
                col = self._sig_index.get(sig)
                if col is not None:
                    return col
        return -1

    def lexical_scores(self, words: Sequence[str]) -> np.ndarray:
        """log P(word_i | symbol) as a float64[n, N] array (-inf where a symbol cannot emit)."""
        n = len(words)
        out = np.full((n, self.n_symbols), -np.inf)
        cols = np.array([self.word_column(w, i == 0) for i, w in enumerate(words)], dtype=np.int64)
        known = cols >= 0
        if known.any() and len(self.lex_symbols):
            rows = np.flatnonzero(known)
            out[np.ix_(rows, self.lex_symbols)] = self.lex_logp[:, cols[known]].T
        return out

    # ----------------------------------------------------------------- tightness
    def tightness(self, tolerance: float = 1e-6, max_iterations: int = 200_000) -> TightnessReport:
        """Partition function per symbol (top role) by fixed-point iteration from zero.

        Z_bot[B] = sum_r p_r Z_top[C_r] Z_top[D_r] + lexical share of B,
        Z_top[A] = sum_e p_e Z_bot[B_e]. The iteration increases monotonically to the least
        fixed point; it stops when an update changes no value by more than 1e-15.
        """
        n = self.n_symbols
        lex_mass = np.zeros(n)
        if len(self.lex_symbols):
            with np.errstate(under="ignore"):
                lex_mass[self.lex_symbols] = np.exp(self.lex_logp).sum(axis=1)
        wb = np.exp(self.bin_logp)
        wu = np.exp(self.un_logp)
        z_top = np.zeros(n)
        it = 0
        while it < max_iterations:
            it += 1
            z_bot = lex_mass.copy()
            np.add.at(z_bot, self.bin_parent, wb * z_top[self.bin_left] * z_top[self.bin_right])
            new_top = np.zeros(n)
            np.add.at(new_top, self.un_parent, wu * z_bot[self.un_child])
            delta = np.max(np.abs(new_top - z_top)) if n else 0.0
            z_top = new_top
            if delta < 1e-15:
                break
        used = np.zeros(n, dtype=bool)
        used[self.un_parent] = True
        partition = {self.symbols[i]: float(z_top[i]) for i in np.flatnonzero(used)}
        tight = bool(np.all(np.abs(z_top[used] - 1.0) <= tolerance))
        return TightnessReport(tight=tight, partition=partition, iterations=it)

    # ----------------------------------------------------------------- saving
    def save(self, path: str | Path) -> None:
        """Write the grammar as one ``.npz`` file (arrays + JSON metadata, no pickle)."""
        meta = {
            "format_version": FORMAT_VERSION,
            "symbols": list(self.symbols),
            "start": self.start,
            "chains": [list(c) for c in self.chains],
            "vocab": list(self.vocab),
            "signatures": list(self.signatures),
            "meta": self.meta,
        }
        blob = np.frombuffer(json.dumps(meta).encode("utf-8"), dtype=np.uint8)
        # Deflated: the lexicon is dense float64 (tags x words) and mostly repeats; 31 MB
        # raw for all GUM trees, 2.9 MB deflated. Storing only its finite entries was tried
        # and is larger (a third of the entries are finite; their coordinates cost more).
        with open(path, "wb") as fh:
            np.savez_compressed(
                fh,
                meta=blob,
                bin_parent=self.bin_parent,
                bin_left=self.bin_left,
                bin_right=self.bin_right,
                bin_logp=self.bin_logp,
                un_parent=self.un_parent,
                un_child=self.un_child,
                un_chain=self.un_chain,
                un_logp=self.un_logp,
                lex_symbols=self.lex_symbols,
                lex_logp=self.lex_logp,
            )

    @classmethod
    def load(cls, path: str | Path) -> Grammar:
        """Read a grammar written by :meth:`save`; GrammarError on anything else."""
        try:
            with open(path, "rb") as fh:
                data = fh.read()
            arrays = np.load(io.BytesIO(data), allow_pickle=False)
            meta = json.loads(arrays["meta"].tobytes().decode("utf-8"))
        except (OSError, ValueError, KeyError, UnicodeDecodeError) as exc:
            raise GrammarError(f"{path}: not a Treewright grammar file ({exc})") from exc
        version = meta.get("format_version")
        if version != FORMAT_VERSION:
            raise GrammarError(
                f"{path}: grammar format version {version!r} is not supported "
                f"(this build reads version {FORMAT_VERSION})"
            )
        try:
            return cls(
                symbols=meta["symbols"],
                start=meta["start"],
                chains=meta["chains"],
                vocab=meta["vocab"],
                signatures=meta["signatures"],
                meta=meta["meta"],
                **{
                    k: arrays[k]
                    for k in (
                        "bin_parent",
                        "bin_left",
                        "bin_right",
                        "bin_logp",
                        "un_parent",
                        "un_child",
                        "un_chain",
                        "un_logp",
                        "lex_symbols",
                        "lex_logp",
                    )
                },
            )
        except KeyError as exc:
            raise GrammarError(f"{path}: grammar file lacks {exc}") from exc

    # ----------------------------------------------------------------- explicit rules
    @classmethod
    def from_text(cls, text: str, start: str | None = None) -> Grammar:
        """Build a grammar from rule lines ``PROB  LHS -> RHS``.

        RHS is one or two symbols, or one quoted terminal (``'word'``). ``#`` starts a
        comment. The start symbol is ``start`` or the first rule's left-hand side. Unary rules
        between symbols must form no cycle. Probabilities are used as given (no renormalizing).
        """
        rules: list[tuple[str, tuple[str, ...], float, bool]] = []
        for lineno, raw in enumerate(text.splitlines(), 1):
            line = raw.split("#", 1)[0].strip()
            if not line:
                continue
            m = _RULE_LINE.match(line)
            if not m:
                raise GrammarError(f"line {lineno}: expected 'PROB  LHS -> RHS', got {raw!r}")
            prob = float(m.group(1))
            lhs = m.group(2)
            rhs = m.group(3).split()
            if not 0.0 < prob <= 1.0:
                raise GrammarError(f"line {lineno}: probability {prob} not in (0, 1]")
            if len(rhs) == 1 and len(rhs[0]) >= 2 and rhs[0][0] == rhs[0][-1] == "'":
                rules.append((lhs, (rhs[0][1:-1],), prob, True))
            elif 1 <= len(rhs) <= 2 and not any("'" in r for r in rhs):
                rules.append((lhs, tuple(rhs), prob, False))
            else:
                raise GrammarError(
                    f"line {lineno}: right-hand side must be one or two symbols "
                    f"or one quoted word, got {m.group(3)!r}"
                )
        if not rules:
            raise GrammarError("no rules")
        return _from_rules(rules, start or rules[0][0])

    def __repr__(self) -> str:
        return (
            f"Grammar({self.n_symbols} symbols, {len(self.bin_logp)} binary rules, "
            f"{len(self.un_logp)} unary edges, {len(self.vocab)} words)"
        )


_RULE_LINE = re.compile(r"^([0-9.eE+-]+)\s+(\S+)\s*->\s*(.+)$")


def _frozen(arr: np.ndarray, dtype: type) -> np.ndarray:
    out: np.ndarray = np.ascontiguousarray(np.asarray(arr, dtype=dtype))
    if out is arr:
        out = out.copy()
    out.flags.writeable = False
    return out


def _from_rules(rules: list[tuple[str, tuple[str, ...], float, bool]], start: str) -> Grammar:
    names: dict[str, int] = {}

    def sym(name: str) -> int:
        return names.setdefault(name, len(names))

    sym(start)
    unary: dict[str, list[tuple[str, float]]] = {}
    binary: list[tuple[int, int, int, float]] = []
    lexical: list[tuple[str, str, float]] = []
    for lhs, rhs, prob, terminal in rules:
        sym(lhs)
        if terminal:
            lexical.append((lhs, rhs[0], prob))
        elif len(rhs) == 1:
            sym(rhs[0])
            unary.setdefault(lhs, []).append((rhs[0], prob))
        else:
            binary.append((sym(lhs), sym(rhs[0]), sym(rhs[1]), prob))
    u_mass = {a: sum(p for _, p in lst) for a, lst in unary.items()}
    for a, m in u_mass.items():
        if m > 1.0 + 1e-9:
            raise GrammarError(f"unary rules of {a} sum to {m} > 1")
    # Bottom role of B: its binary and lexical rules, renormalized by 1 - u(B).
    stay = {a: 1.0 - u_mass.get(a, 0.0) for a in names}
    chains: list[tuple[str, ...]] = []
    chain_index: dict[tuple[str, ...], int] = {}
    edges: list[tuple[int, int, int, float]] = []

    def walk(chain: tuple[str, ...], prob: float) -> None:
        head = chain[-1]
        if stay[head] > 1e-15:
            key = chain
            ci = chain_index.setdefault(key, len(chains))
            if ci == len(chains):
                chains.append(key)
            edges.append((names[chain[0]], names[head], ci, prob * stay[head]))
        for child, p in unary.get(head, []):
            if child in chain:
                raise GrammarError(f"unary cycle through {' -> '.join(chain + (child,))}")
            walk(chain + (child,), prob * p)

    for a in list(names):
        walk((a,), 1.0)
    vocab = sorted({w for _, w, _ in lexical})
    lex_names = sorted({a for a, _, _ in lexical}, key=names.__getitem__)
    lex_row = {a: i for i, a in enumerate(lex_names)}
    col = {w: i for i, w in enumerate(vocab)}
    lex = np.full((len(lex_names), len(vocab)), -np.inf)
    for a, w, p in lexical:
        lex[lex_row[a], col[w]] = np.logaddexp(lex[lex_row[a], col[w]], math.log(p / stay[a]))
    b = np.array(binary, dtype=float).reshape(-1, 4)
    stays = np.array([stay[n] for n in names])
    e = np.array(edges, dtype=float).reshape(-1, 4)
    symbols = sorted(names, key=names.__getitem__)
    return Grammar(
        symbols=symbols,
        start=names[start],
        bin_parent=b[:, 0],
        bin_left=b[:, 1],
        bin_right=b[:, 2],
        bin_logp=np.log(b[:, 3]) - np.log(stays[b[:, 0].astype(int)]),
        un_parent=e[:, 0],
        un_child=e[:, 1],
        un_chain=e[:, 2],
        un_logp=np.log(e[:, 3]),
        chains=chains,
        lex_symbols=np.array([names[a] for a in lex_names]),
        lex_logp=lex,
        vocab=vocab,
        signatures=[],
        meta={"signature_scheme": "none", "source": "rules"},
    )


# --------------------------------------------------------------------------- training
#: Counts per domain (index 0: reference, 1: in-domain) and the weighted counts made of them.
DomainCounts = tuple[Counter[Any], Counter[Any]]
Effective = dict[Any, float]


@dataclass(frozen=True)
class Weighting:
    """How in-domain trees count against reference trees in :func:`train_grammar`.

    ``rules``: each in-domain tree counts this many times in the rule counts (count merging,
    Bacchiani and Roark 2003, from memory); ``lexicon``: the same for the word-tag counts of
    the lexicon and its unknown-word classes, separately, since a domain's words and its
    constructions need not need the same weight. ``prior``: when set, the rules are instead
    estimated by MAP adaptation with the reference grammar as a Dirichlet prior of this
    strength per left-hand side: P(r | A) = (c_in(r) + prior * P_ref(r | A)) /
    (c_in(A) + prior), so a frequent in-domain symbol follows its in-domain counts whatever
    the reference's size (the MAP estimate of the same authors; ``rules`` is then unused).
    Plain counts (1, 1, None) are the default.
    """

    rules: float = 1.0
    lexicon: float = 1.0
    prior: float | None = None

    def __post_init__(self) -> None:
        if not (self.rules > 0 and self.lexicon > 0):
            raise GrammarError(
                f"weights must be positive, got rules={self.rules} lexicon={self.lexicon}"
            )
        if self.prior is not None and not self.prior > 0:
            raise GrammarError(f"the prior strength must be positive, got {self.prior}")

    def to_dict(self) -> dict[str, float | None]:
        return {"rules": self.rules, "lexicon": self.lexicon, "prior": self.prior}

    def combine(
        self, edges: DomainCounts, binaries: DomainCounts, lexical: DomainCounts
    ) -> tuple[Effective, Effective, Effective]:
        """Effective (float) counts of the unary edges, binary rules and lexical uses from
        the counts per domain (index 0 reference, 1 in-domain). Edges are normalized per
        parent (top role); binary rules and lexical uses together per bottom symbol."""
        if self.prior is None:
            return (
                _merged(edges, self.rules),
                _merged(binaries, self.rules),
                _merged(lexical, self.rules),
            )
        # MAP: reference counts rescaled so that each left-hand side's total is ``prior``.
        top_ref: Counter[int] = Counter()
        for (a, _, _), k in edges[0].items():
            top_ref[a] += k
        bottom_ref: Counter[int] = Counter()
        for (b, _, _), k in binaries[0].items():
            bottom_ref[b] += k
        for t, k in lexical[0].items():
            bottom_ref[t] += k
        prior = self.prior
        e = _rescaled(edges, lambda key: prior / top_ref[key[0]])
        b = _rescaled(binaries, lambda key: prior / bottom_ref[key[0]])
        x = _rescaled(lexical, lambda key: prior / bottom_ref[key])
        return e, b, x


def _merged(counts: DomainCounts, weight: float) -> Effective:
    out: dict[Any, float] = {k: float(v) for k, v in counts[0].items()}
    for k, v in counts[1].items():
        out[k] = out.get(k, 0.0) + weight * v
    return out


def _rescaled(counts: DomainCounts, factor: Callable[[Any], float]) -> Effective:
    out: dict[Any, float] = {k: v * factor(k) for k, v in counts[0].items()}
    for k, v in counts[1].items():
        out[k] = out.get(k, 0.0) + float(v)
    return out


def train_weighted(
    trees: Iterable[Tree],
    horizontal: int | None = DEFAULT_HORIZONTAL,
    vertical: int = DEFAULT_VERTICAL,
    progress: Progress | None = None,
    tag_ancestors: int = DEFAULT_TAG_ANCESTORS,
    features: Sequence[str] = DEFAULT_FEATURES,
    alpha: float = 1.0,
    beta: float = 1.0,
    head_outward: bool = DEFAULT_HEAD_OUTWARD,
    plain_intermediates: bool = DEFAULT_PLAIN_INTERMEDIATES,
    min_context: int = DEFAULT_MIN_CONTEXT,
    reference: Iterable[Tree] = (),
    weightings: Sequence[Weighting] = (Weighting(),),
) -> list[Grammar]:
    """One grammar per weighting, all from one count of the trees (the counting dominates
    the cost, so a grid of weightings costs little more than one grammar); the parameters
    are those of :func:`train_grammar`.
    """
    from parser.annotate import annotators_for, functions_kept

    t0 = time.perf_counter()
    in_list = list(trees)
    ref_list = list(reference)
    if not in_list and not ref_list:
        raise GrammarError("cannot train a grammar from zero trees")
    annotators = annotators_for(features)
    keep = functions_kept(features)
    names: dict[str, int] = {}
    chains: dict[tuple[str, ...], int] = {}
    # Counts per domain (0: reference, 1: in-domain), combined by the weighting at the end.
    edge_count: DomainCounts = (Counter(), Counter())
    bin_count: DomainCounts = (Counter(), Counter())
    lex_obs: list[tuple[int, str, bool, int]] = []
    root_label: str | None = None
    domain = 1

    def sym(label: str) -> int:
        return names.setdefault(label, len(names))

    def top(node: Tree) -> int:
        chain = [node.label()]
        cur = node
        while len(cur) == 1 and not isinstance(cur[0], str):
            cur = cur[0]
            chain.append(cur.label())
        key = tuple(chain)
        ci = chains.setdefault(key, len(chains))
        a = sym(chain[0])
        b = sym(chain[-1])
        edge_count[domain][(a, b, ci)] += 1
        if len(cur) == 1:
            lex_obs.append((b, cur[0], False, domain))
        elif len(cur) == 2:
            bin_count[domain][(b, top(cur[0]), top(cur[1]))] += 1
        else:
            raise GrammarError(f"node {cur.label()!r} has {len(cur)} children after binarizing")
        return a

    tree_list = [(1, t) for t in in_list] + [(0, t) for t in ref_list]
    total = len(tree_list)
    cleaned_list = []
    for i, (_, tree) in enumerate(tree_list):
        if not isinstance(tree, Tree):
            raise GrammarError(f"training item {i} is not a tree: {tree!r}")
        cleaned = bz.clean_tree(tree, keep)
        if root_label is None:
            root_label = cleaned.label()
        elif cleaned.label() != root_label:
            raise GrammarError(
                f"tree {i} has root label {cleaned.label()!r}, the first tree had {root_label!r}"
            )
        cleaned_list.append(cleaned)
    settings = (horizontal, vertical, tag_ancestors, annotators, head_outward, plain_intermediates)
    rare = None
    if min_context > 1:
        rare = bz.rare_labels((bz.binarize(c, *settings) for c in cleaned_list), min_context)
    for i, cleaned in enumerate(cleaned_list):
        domain = tree_list[i][0]
        binary = bz.binarize(cleaned, *settings, rare=rare)
        n_before = len(lex_obs)
        top(binary)
        if len(lex_obs) > n_before:
            first_tag, first_word, _, d = lex_obs[n_before]
            lex_obs[n_before] = (first_tag, first_word, True, d)
        if progress is not None and (i % 200 == 0 or i == total - 1):
            progress(i + 1, total)
    assert root_label is not None
    start = names[root_label]
    symbols = sorted(names, key=names.__getitem__)
    n = len(symbols)
    lex_ids = sorted({t for t, _, _, _ in lex_obs})
    lex_count = (
        Counter(t for t, _, _, d in lex_obs if d == 0),
        Counter(t for t, _, _, d in lex_obs if d == 1),
    )
    seconds_counting = time.perf_counter() - t0
    chain_list = sorted(chains, key=chains.__getitem__)

    def estimate(weighting: Weighting) -> Grammar:
        t1 = time.perf_counter()
        edge_w, bin_w, lex_share_w = weighting.combine(edge_count, bin_count, lex_count)

        bins = np.array([(a, b, c, k) for (a, b, c), k in bin_w.items()], dtype=float)
        bins = bins.reshape(-1, 4)
        edges = np.array([(a, b, ci, k) for (a, b, ci), k in edge_w.items()], dtype=float)
        edges = edges.reshape(-1, 4)
        bottom = np.zeros(n)
        np.add.at(bottom, bins[:, 0].astype(int), bins[:, 3])
        lex_mass = np.zeros(n)
        for t, k in lex_share_w.items():
            lex_mass[t] = k
        bottom += lex_mass
        tops = np.zeros(n)
        np.add.at(tops, edges[:, 0].astype(int), edges[:, 3])
        bin_logp = np.log(bins[:, 3]) - np.log(bottom[bins[:, 0].astype(int)])
        un_logp = np.log(edges[:, 3]) - np.log(tops[edges[:, 0].astype(int)])

        lex_row = {t: i for i, t in enumerate(lex_ids)}
        lex_logp, vocab, sigs = estimate_lexicon(
            ((lex_row[t], w, f, weighting.lexicon if d else 1.0) for t, w, f, d in lex_obs),
            len(lex_ids),
            alpha=alpha,
            beta=beta,
        )
        # Lexical share of each lexical symbol's bottom role (1 for pure POS tags).
        share = np.array([lex_mass[t] / bottom[t] for t in lex_ids])
        lex_logp = lex_logp + np.log(share)[:, None]
        meta = {
            "signature_scheme": SCHEME,
            "source": "trees",
            "horizontal": horizontal,
            "vertical": vertical,
            "tag_ancestors": tag_ancestors,
            "features": list(features),
            "alpha": alpha,
            "beta": beta,
            "head_outward": head_outward,
            "plain_intermediates": plain_intermediates,
            "min_context": min_context,
            "trees": total,
            "in_domain_trees": len(in_list),
            "reference_trees": len(ref_list),
            "weighting": weighting.to_dict(),
            "tag_counts": {symbols[t]: lex_count[0][t] + lex_count[1][t] for t in lex_ids},
            "seconds": round(seconds_counting + time.perf_counter() - t1, 3),
        }
        return Grammar(
            symbols=symbols,
            start=start,
            bin_parent=bins[:, 0],
            bin_left=bins[:, 1],
            bin_right=bins[:, 2],
            bin_logp=bin_logp,
            un_parent=edges[:, 0],
            un_child=edges[:, 1],
            un_chain=edges[:, 2],
            un_logp=un_logp,
            chains=chain_list,
            lex_symbols=np.array(lex_ids),
            lex_logp=lex_logp,
            vocab=vocab,
            signatures=sigs,
            meta=meta,
        )

    return [estimate(w) for w in weightings]


def train_grammar(
    trees: Iterable[Tree],
    *,
    reference: Iterable[Tree] = (),
    weighting: Weighting | None = None,
    progress: Progress | None = None,
    **options: Any,
) -> Grammar:
    """Estimate a grammar from training trees (each with its root wrapper, e.g. ROOT).

    ``horizontal``/``vertical``: markovization orders (see :func:`parser.binarize.binarize`);
    ``tag_ancestors``: parent annotation of POS tags; ``features``: names of extra
    annotations from :mod:`parser.annotate`; ``alpha``/``beta``: lexicon smoothing
    (see :mod:`parser.lexicon`); ``head_outward``, ``plain_intermediates``: how phrases are
    factored (see :func:`parser.binarize.binarize`); ``min_context``: variable-order
    markovization, see :data:`DEFAULT_MIN_CONTEXT`. ``reference``: further trees from
    another domain, counted against ``trees`` (the in-domain trees) as ``weighting`` says
    (see :class:`Weighting`; default: plain counts). ``progress(done, total)`` is called now
    and then.
    Keyword ``options`` (the markovization, annotation and smoothing parameters above) are
    those of :func:`train_weighted`, with the defaults of this module.
    Raises GrammarError when there is no tree or the trees disagree on the root label.
    """
    return train_weighted(
        trees,
        reference=reference,
        weightings=(weighting or Weighting(),),
        progress=progress,
        **options,
    )[0]
