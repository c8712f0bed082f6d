"""Wording shared by pages, services and the command line.

``plural(3, "sentence")`` gives "3 sentences" and ``plural(1, "pair")`` "1 pair";
``as_written(text)`` shows a sentence's words as a person wrote them (``-LRB-`` as ``(``:
the escapes belong to bracketed text only).
"""

from __future__ import annotations


def plural(count: int, word: str, many: str | None = None) -> str:
    """``count`` and ``word`` in the number that count needs ("1 pair", "2 pairs")."""
    return f"{count} {word if count == 1 else (many or word + 's')}"


def as_written(text: str) -> str:
    """``text`` with the bracket escapes of its words undone, for reading."""
    # imported here: the command line uses plural() and should not load the parser (NLTK)
    from parser.trees import unescape_word

    return unescape_word(text or "")
