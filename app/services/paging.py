"""One page of a longer listing: which page, its size, and how many pages there are."""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(kw_only=True)
class PageWindow:
    page: int
    per_page: int
    total: int

    @property
    def pages(self) -> int:
        return max(1, -(-self.total // self.per_page))
