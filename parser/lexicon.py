"""Word signatures for unknown words, and the smoothed lexicon P(word | tag).

What it computes
    :func:`signature` maps a word to a coarse class from its spelling (capitals, digits, dashes,
    punctuation, common English suffixes), with :func:`signature_backoff` giving coarser classes.
    This follows the idea of the unknown-word classes of Klein and Manning 2003 (from memory);
    the feature list is our own.

    :func:`estimate_lexicon` estimates, for every tag t and every column x (a known word or a
    signature class), P(x | t) by Bayes inversion of a smoothed P(t | x), as in the lexicon of
    Petrov et al. 2006 (from memory):

        P(t | sig) = (c_rare(t, sig) + alpha * P_rare(t)) / (c_rare(sig) + alpha)
        P(t | w)   = (c(t, w) + beta * P(t | sig(w))) / (c(w) + beta)
        P(x | t)  ~ P(t | x) * c(x)       then normalized over x for each t

    where "rare" words are those seen at most ``rare`` times (their counts stand in for the mass
    of unseen words, Good-Turing style) and c(sig) is the rare-word count of a signature. Each
    row sums to one, so every known word gets some probability under every tag its signature
    allows, and every unknown word gets some under the tags its signature class was seen with.

Complexity: O(tags x columns) memory and time. Limits: English-oriented suffix list.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Iterable

import numpy as np

SCHEME = "tw-sig-1"

_SUFFIXES = (
    "ing",
    "ed",
    "ly",
    "ion",
    "ions",
    "ity",
    "ness",
    "ment",
    "ments",
    "able",
    "ible",
    "al",
    "ial",
    "ive",
    "ous",
    "ful",
    "less",
    "ist",
    "ists",
    "ism",
    "ize",
    "ise",
    "ized",
    "ant",
    "ent",
    "ence",
    "ance",
    "ary",
    "ory",
    "er",
    "ers",
    "est",
    "ic",
    "ics",
    "ical",
    "y",
    "s",
    "es",
    "ies",
    "th",
    "en",
    "ship",
    "hood",
    "age",
    "ate",
    "ated",
    "ward",
    "wards",
    "like",
    "'s",
)
_SUFFIXES_BY_LENGTH = sorted(_SUFFIXES, key=len, reverse=True)


def signature(word: str, first: bool = False) -> str:
    """The full signature class of ``word`` (``first``: it opens the sentence)."""
    return "|".join(_features(word, first))


def signature_backoff(word: str, first: bool = False) -> list[str]:
    """Signatures from finest to coarsest; the last one is always ``"UNK"``."""
    feats = _features(word, first)
    out = ["|".join(feats[:n]) for n in range(len(feats), 0, -1)]
    if out[-1] != "UNK":
        out.append("UNK")
    return out


def _features(word: str, first: bool) -> list[str]:
    feats = ["UNK"]
    letters = [c for c in word if c.isalpha()]
    digits = sum(c.isdigit() for c in word)
    if not letters and not digits:
        feats.append("punct")
        return feats
    if digits and not letters:
        feats.append("num")
    elif digits:
        feats.append("alnum")
    elif all(c.isupper() for c in letters):
        feats.append("caps" if len(letters) > 1 else "cap1")
    elif word[0].isupper():
        feats.append("init" if first else "cap")
    elif any(c.isupper() for c in letters):
        feats.append("mixed")
    else:
        feats.append("low")
    if "-" in word[1:]:
        feats.append("dash")
    elif any(c in ".@/:_" for c in word):
        feats.append("dot")
    else:
        feats.append("plain")
    lower = word.lower()
    if letters and len(lower) >= 3:
        for suffix in _SUFFIXES_BY_LENGTH:
            if lower.endswith(suffix) and len(lower) > len(suffix) + 1:
                feats.append("-" + suffix)
                break
    return feats


def estimate_lexicon(
    pairs: Iterable[tuple[int, str, bool] | tuple[int, str, bool, float]],
    n_tags: int,
    alpha: float = 1.0,
    beta: float = 1.0,
    rare: int = 1,
    backoff_weight: float = 0.01,
) -> tuple[np.ndarray, list[str], list[str]]:
    """Estimate log P(x | t) from (tag id, word, sentence-initial[, weight]) observations.

    A weight (default 1) scales an observation's count everywhere; whether a word is rare is
    decided on how often it was seen, not on its weight.

    Returns ``(logp, vocab, signatures)`` where ``logp`` has shape
    ``(n_tags, len(vocab) + len(signatures))``, columns ordered vocab first. Each row with any
    observation sums to one (in probability); rows of tags never seen are all ``-inf``.
    Coarser back-off signatures get ``backoff_weight`` times the mass of the finest one.
    """
    tag_word: dict[tuple[int, str], float] = {}
    word_count: dict[str, float] = {}
    seen_count: Counter[str] = Counter()
    first_seen: dict[str, bool] = {}
    for obs in pairs:
        tag, word, first = obs[0], obs[1], obs[2]
        weight = float(obs[3]) if len(obs) > 3 else 1.0
        tag_word[(tag, word)] = tag_word.get((tag, word), 0.0) + weight
        word_count[word] = word_count.get(word, 0.0) + weight
        seen_count[word] += 1
        first_seen.setdefault(word, first)
    vocab = sorted(word_count)
    col = {w: i for i, w in enumerate(vocab)}
    # Rare-word statistics per signature (every back-off level).
    sig_index: dict[str, int] = {}
    sig_weight: dict[str, float] = {}
    rare_tag_sig: Counter[tuple[int, int]] = Counter()
    rare_sig: Counter[int] = Counter()  # float counts when observations carry weights
    rare_tag = np.zeros(n_tags)
    for (tag, word), c in tag_word.items():
        if seen_count[word] > rare:
            continue
        rare_tag[tag] += c
        for level, sig in enumerate(signature_backoff(word, first_seen[word])):
            s = sig_index.setdefault(sig, len(sig_index))
            sig_weight[sig] = 1.0 if level == 0 else backoff_weight
            rare_tag_sig[(tag, s)] += c  # type: ignore[assignment]
            rare_sig[s] += c  # type: ignore[assignment]
    if "UNK" not in sig_index:
        sig_index["UNK"] = len(sig_index)
        sig_weight["UNK"] = backoff_weight
    sigs = sorted(sig_index, key=sig_index.__getitem__)
    n_sig = len(sigs)
    p_rare = rare_tag / rare_tag.sum() if rare_tag.sum() > 0 else np.zeros(n_tags)
    c_tag_sig = np.zeros((n_tags, n_sig))
    for (tag, s), c in rare_tag_sig.items():
        c_tag_sig[tag, s] = c
    c_sig = np.array([rare_sig[s] for s in range(n_sig)], dtype=float)
    p_tag_given_sig = (c_tag_sig + alpha * p_rare[:, None]) / (c_sig + alpha)[None, :]
    # Unnormalized joint mass M[t, x] = P(t | x) c(x).
    mass = np.zeros((n_tags, len(vocab) + n_sig))
    c_word = np.array([word_count[w] for w in vocab], dtype=float)
    sig_of_word = np.array(
        [_finest_known(w, first_seen[w], sig_index) for w in vocab], dtype=np.int64
    )
    mass[:, : len(vocab)] = beta * p_tag_given_sig[:, sig_of_word]
    for (tag, word), c in tag_word.items():
        mass[tag, col[word]] += c
    mass[:, : len(vocab)] *= (c_word / (c_word + beta))[None, :]
    weights = np.array([sig_weight[s] for s in sigs])
    mass[:, len(vocab) :] = p_tag_given_sig * (np.maximum(c_sig, 1.0) * weights)[None, :]
    total = mass.sum(axis=1, keepdims=True)
    seen = np.zeros(n_tags, dtype=bool)
    for tag, _ in tag_word:
        seen[tag] = True
    with np.errstate(divide="ignore", invalid="ignore"):
        logp = np.where(seen[:, None] & (mass > 0), np.log(mass) - np.log(total), -np.inf)
    return logp, vocab, sigs


def _finest_known(word: str, first: bool, sig_index: dict[str, int]) -> int:
    for sig in signature_backoff(word, first):
        if sig in sig_index:
            return sig_index[sig]
    return sig_index["UNK"]
