"""Small server-side SVG charts for the Agreement and Grammars pages.

What it computes: an SVG document fragment (``<svg>...</svg>``) for a line chart with one or
more series over a numeric or categorical x axis and a y axis in [0, 1] (F1 values), and a
horizontal bar for a single figure. Everything is drawn with SVG elements and presentation
attributes plus CSS classes (``chart-*``) that static/css/agreement.css styles; there is no
``style=""`` attribute (the CSP forbids inline styles) and no script. Every text that reaches
the SVG passes through markupsafe's escaping, so labels from users are safe.

Complexity: linear in the number of points. Limits: ticks are chosen for the [0, 1] range of
scores and for at most a few hundred points; there is no zooming or interaction beyond the
``<title>`` tooltip each point carries.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Protocol

from markupsafe import Markup, escape


@dataclass(frozen=True)
class Point:
    """One point: ``x`` is a number (numeric axis) or an index (categorical axis)."""

    x: float
    y: float
    tip: str = ""


@dataclass(frozen=True)
class Series:
    name: str
    points: Sequence[Point]
    css: str = "s1"  # class suffix; agreement.css gives chart-s1, chart-s2... their colours


@dataclass(frozen=True)
class Frame:
    """Plot geometry in SVG user units."""

    width: int = 640
    height: int = 260
    left: int = 48
    right: int = 16
    top: int = 16
    bottom: int = 40

    @property
    def plot_w(self) -> float:
        return float(self.width - self.left - self.right)

    @property
    def plot_h(self) -> float:
        return float(self.height - self.top - self.bottom)


def _fmt(v: float) -> str:
    return f"{v:.1f}"


def _nice_ticks(lo: float, hi: float, most: int = 6) -> list[float]:
    """Round tick positions covering [lo, hi] (1, 2 or 5 times a power of ten apart)."""
    if hi <= lo:
        return [lo]
    raw = (hi - lo) / max(1, most - 1)
    power = 10.0 ** _floor_log10(raw)
    step = next(m * power for m in (1, 2, 5, 10) if m * power >= raw)
    first = step * _ceil_div(lo, step)
    ticks = []
    t = first
    while t <= hi + step * 1e-9:
        ticks.append(round(t, 10))
        t += step
    return ticks


def _floor_log10(v: float) -> int:
    n = 0
    while v >= 10:
        v /= 10
        n += 1
    while v < 1:
        v *= 10
        n -= 1
    return n


def _ceil_div(a: float, b: float) -> int:
    q = a / b
    n = int(q)
    return n if n >= q else n + 1


def line_chart(
    series: Sequence[Series],
    *,
    title: str,
    x_title: str,
    y_title: str = "F1",
    categories: Sequence[str] | None = None,
    frame: Frame | None = None,
    y_min: float = 0.0,
    y_max: float = 1.0,
) -> Markup:
    """An SVG line chart; with ``categories`` the x values are indices into that list.

    A chart with no point at all shows the axes and the words "no data yet".
    """
    f = frame or Frame()
    xs = [p.x for s in series for p in s.points]
    if categories is not None:
        x_lo, x_hi = -0.5, max(len(categories) - 0.5, 0.5)
    elif xs:
        x_lo, x_hi = min(xs), max(xs)
        if x_hi == x_lo:
            x_lo, x_hi = x_lo - 1, x_hi + 1
    else:
        x_lo, x_hi = 0.0, 1.0

    def sx(x: float) -> float:
        return f.left + (x - x_lo) / (x_hi - x_lo) * f.plot_w

    def sy(y: float) -> float:
        y = min(max(y, y_min), y_max)
        return f.top + (1 - (y - y_min) / (y_max - y_min)) * f.plot_h

    parts: list[str] = [
        f'<svg class="chart" role="img" viewBox="0 0 {f.width} {f.height}" '
        f'width="{f.width}" height="{f.height}" xmlns="http://www.w3.org/2000/svg">',
        f"<title>{escape(title)}</title>",
    ]
    # grid and y ticks
    for t in _nice_ticks(y_min, y_max, 6):
        y = sy(t)
        parts.append(
            f'<line class="chart-grid" x1="{f.left}" y1="{_fmt(y)}" '
            f'x2="{f.width - f.right}" y2="{_fmt(y)}"/>'
        )
        parts.append(
            f'<text class="chart-tick" x="{f.left - 6}" y="{_fmt(y + 4)}" '
            f'text-anchor="end">{t:.1f}</text>'
        )
    # x ticks
    base = f.top + f.plot_h
    if categories is not None:
        stride = max(1, len(categories) // 8)
        for i, name in enumerate(categories):
            if i % stride:
                continue
            parts.append(
                f'<text class="chart-tick" x="{_fmt(sx(i))}" y="{_fmt(base + 16)}" '
                f'text-anchor="middle">{escape(name)}</text>'
            )
    elif xs:
        whole = all(float(x).is_integer() for x in xs)  # counts: no tick at 74.5 trees
        for t in _nice_ticks(x_lo, x_hi, 7):
            if whole and not float(t).is_integer():
                continue
            parts.append(
                f'<text class="chart-tick" x="{_fmt(sx(t))}" y="{_fmt(base + 16)}" '
                f'text-anchor="middle">{t:g}</text>'
            )
    parts.append(
        f'<line class="chart-axis" x1="{f.left}" y1="{_fmt(base)}" '
        f'x2="{f.width - f.right}" y2="{_fmt(base)}"/>'
    )
    parts.append(
        f'<line class="chart-axis" x1="{f.left}" y1="{f.top}" x2="{f.left}" y2="{_fmt(base)}"/>'
    )
    parts.append(
        f'<text class="chart-axis-title" x="{_fmt(f.left + f.plot_w / 2)}" '
        f'y="{f.height - 4}" text-anchor="middle">{escape(x_title)}</text>'
    )
    parts.append(
        f'<text class="chart-axis-title" x="12" y="{_fmt(f.top + f.plot_h / 2)}" '
        f'text-anchor="middle" transform="rotate(-90 12 {_fmt(f.top + f.plot_h / 2)})"'
        f">{escape(y_title)}</text>"
    )
    if not xs:
        parts.append(
            f'<text class="chart-empty" x="{_fmt(f.left + f.plot_w / 2)}" '
            f'y="{_fmt(f.top + f.plot_h / 2)}" text-anchor="middle">no data yet</text>'
        )
    for s in series:
        pts = sorted(s.points, key=lambda p: p.x)
        if len(pts) > 1:
            path = " ".join(f"{_fmt(sx(p.x))},{_fmt(sy(p.y))}" for p in pts)
            parts.append(
                f'<polyline class="chart-line chart-{escape(s.css)}" fill="none" points="{path}"/>'
            )
        for p in pts:
            tip = p.tip or f"{s.name}: {p.y:.3f}"
            parts.append(
                f'<circle class="chart-dot chart-{escape(s.css)}" '
                f'cx="{_fmt(sx(p.x))}" cy="{_fmt(sy(p.y))}" r="3.5">'
                f"<title>{escape(tip)}</title></circle>"
            )
    if len(series) > 1:
        x = f.left + 8
        for s in series:
            parts.append(
                f'<rect class="chart-key chart-{escape(s.css)}" x="{x}" '
                f'y="{f.top}" width="10" height="10"/>'
            )
            parts.append(
                f'<text class="chart-tick" x="{x + 14}" y="{f.top + 9}">{escape(s.name)}</text>'
            )
            x += 24 + 7 * len(s.name)
    parts.append("</svg>")
    return Markup("".join(parts))


def score_bar(value: float | None, *, width: int = 120, height: int = 12) -> Markup:
    """A small horizontal bar for one score in [0, 1] (empty frame for ``None``)."""
    parts = [
        f'<svg class="score-bar" viewBox="0 0 {width} {height}" width="{width}" '
        f'height="{height}" aria-hidden="true" xmlns="http://www.w3.org/2000/svg">',
        f'<rect class="score-bar-back" x="0" y="0" width="{width}" height="{height}"/>',
    ]
    if value is not None:
        w = max(0.0, min(1.0, value)) * width
        parts.append(
            f'<rect class="score-bar-fill" x="0" y="0" width="{_fmt(w)}" height="{height}"/>'
        )
    parts.append("</svg>")
    return Markup("".join(parts))


# --------------------------------------------------------------------------------------------
# the span ladder: the Review page's combined view of several annotators' brackets


class LadderLabel(Protocol):
    @property
    def label(self) -> str: ...
    @property
    def owners(self) -> list[str]: ...


class LadderSpan(Protocol):
    @property
    def start(self) -> int: ...
    @property
    def end(self) -> int: ...
    @property
    def kind(self) -> str: ...  # all | split | some
    @property
    def labels(self) -> Sequence[LadderLabel]: ...


CHAR_W = 7.8  # width of one character of the ladder's monospace text at 13px (approximate)
LABEL_CHAR_W = 6.7  # the same for the 11px bar labels
WORD_PAD = 10.0
WORD_GAP = 4.0
ROW_H = 24.0
BAR_H = 18.0


def ladder_rows(spans: Sequence[LadderSpan]) -> list[int]:
    """A row (1 = lowest) for each span: above every span it contains, and never on the same
    row as a span it overlaps (crossing brackets from different annotators)."""
    order = sorted(range(len(spans)), key=lambda i: (spans[i].end - spans[i].start, spans[i].start))
    rows = [0] * len(spans)
    placed: list[int] = []
    for i in order:
        s = spans[i]
        row = 1 + max(
            (rows[j] for j in placed if spans[j].start >= s.start and spans[j].end <= s.end),
            default=0,
        )
        while any(
            rows[j] == row and spans[j].start < s.end and s.start < spans[j].end for j in placed
        ):
            row += 1
        rows[i] = row
        placed.append(i)
    return rows


def _chip_text(span: LadderSpan, everyone: int) -> str:
    if span.kind == "all":
        return " ".join(x.label for x in span.labels)
    return "  ".join(
        x.label if len(x.owners) == everyone else f"{x.label}·{''.join(x.owners)}"
        for x in span.labels
    )


def span_ladder(
    words: Sequence[str],
    spans: Sequence[LadderSpan],
    annotators: int,
    *,
    title: str = "Combined brackets",
) -> Markup:
    """Words along the bottom; above them one bar per bracketed span, stacked so that a span
    sits above the spans inside it. The bar's class says whether everyone agrees on it
    (``lad-all``), everyone has the span with different labels (``lad-split``) or only some
    annotators have it (``lad-some``; their letters follow the label)."""
    widths = [max(len(w), 1) * CHAR_W + WORD_PAD for w in words]
    # widen the words under a bar whose label would not fit, shortest bars first
    for span in sorted(spans, key=lambda sp: sp.end - sp.start):
        count = span.end - span.start
        have = sum(widths[span.start : span.end]) + WORD_GAP * (count - 1)
        need = len(_chip_text(span, annotators)) * LABEL_CHAR_W + 12
        if need > have:
            for i in range(span.start, span.end):
                widths[i] += (need - have) / count
    xs: list[float] = []
    x = 4.0
    for w in widths:
        xs.append(x)
        x += w + WORD_GAP
    total_w = max(x, 120.0)
    rows = ladder_rows(spans)
    top_row = max(rows, default=0)
    word_y = (top_row + 1) * ROW_H + 8
    height = word_y + 22
    parts = [
        f'<svg class="ladder" role="img" viewBox="0 0 {_fmt(total_w)} {_fmt(height)}" '
        f'width="{_fmt(total_w)}" height="{_fmt(height)}" '
        'xmlns="http://www.w3.org/2000/svg">',
        f"<title>{escape(title)}</title>",
    ]
    for span, row in sorted(zip(spans, rows, strict=True), key=lambda p: -p[1]):
        x0 = xs[span.start]
        x1 = xs[span.end - 1] + widths[span.end - 1]
        y = word_y - 14 - row * ROW_H + (ROW_H - BAR_H)
        text = _chip_text(span, annotators)
        tip = "; ".join(f"{x.label}: {', '.join(x.owners)}" for x in span.labels)
        parts.append(
            f'<g class="lad-span lad-{escape(span.kind)}" data-start="{span.start}" '
            f'data-end="{span.end}"><title>words {span.start + 1}-{span.end}: '
            f"{escape(tip)}</title>"
            f'<rect class="lad-bar" x="{_fmt(x0 + 1)}" y="{_fmt(y)}" '
            f'width="{_fmt(x1 - x0 - 2)}" height="{BAR_H}" rx="3"/>'
            f'<text class="lad-label" x="{_fmt((x0 + x1) / 2)}" y="{_fmt(y + BAR_H - 5)}" '
            f'text-anchor="middle">{escape(text)}</text></g>'
        )
    for i, word in enumerate(words):
        cx = xs[i] + widths[i] / 2
        parts.append(
            f'<text class="lad-word" x="{_fmt(cx)}" y="{_fmt(word_y + 4)}" '
            f'text-anchor="middle">{escape(word)}</text>'
        )
        parts.append(
            f'<text class="lad-index" x="{_fmt(cx)}" y="{_fmt(word_y + 18)}" '
            f'text-anchor="middle">{i + 1}</text>'
        )
    parts.append("</svg>")
    return Markup("".join(parts))
