"""The parser library's exceptions: every error raised on purpose descends from ParserError."""

from __future__ import annotations


class ParserError(Exception):
    """Base class of every error the ``parser`` package raises on purpose."""


class BracketSyntaxError(ParserError):
    """Malformed bracketed text, located by 1-based line and column.

    ``expected`` says what the reader wanted at that place (for example ``"')'"``).
    """

    def __init__(
        self,
        message: str,
        line: int,
        column: int,
        expected: str | None = None,
        source: str | None = None,
    ) -> None:
        self.message = message
        self.line = line
        self.column = column
        self.expected = expected
        self.source = source
        where = f"{source}:" if source else ""
        exp = f" (expected {expected})" if expected else ""
        super().__init__(f"{where}line {line}, column {column}: {message}{exp}")


class GrammarError(ParserError):
    """A grammar that cannot be built, saved or loaded (bad file, wrong format version...)."""


class ConstraintError(ParserError):
    """Constraints that are malformed in themselves (span out of range, crossing pins...)."""
