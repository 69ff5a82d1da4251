"""Inline SVG charts for liftlag's reports: one style, one palette, no plotting library.

Every chart is a self-contained ``<svg>`` string (no scripts, no external references) with a
``<title>`` for screen readers, a caption (``Chart.caption``, the figure's caption in the
template) that states n and the interval level, and a
``viewBox`` so that it scales with the page. Text that comes from the export (labels) is escaped
here, because the template inserts the finished SVG as markup.

The palette is liftlag's own: deep blue and amber as the two main series (they differ in hue
*and* lightness, so they stay apart under red-green colour blindness and in greyscale print),
with teal, plum and slate for further series; intervals are lighter tints of their series. Lines
also differ in dash pattern, so no chart relies on colour alone.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from html import escape
from typing import Sequence

# liftlag's palette (hex): chosen for this project; checked by eye under simulated
# deuteranopia/protanopia — the pairs differ in lightness as well as hue.
INK = "#1c2430"
MUTED = "#5d6b7a"
GRID = "#e3e7ec"
PALETTE = {
    "blue": "#1a466f",     # first series (treated, actual, after a deal)
    "amber": "#d08700",    # second series (holdout, counterfactual, full price)
    "teal": "#2e8b7a",
    "plum": "#7b3f7a",
    "slate": "#7a8794",    # reference lines, random targeting
}
TINTS = {"blue": "#a9c3dc", "amber": "#f1d199", "teal": "#a8d8cd", "plum": "#d6b3d5", "slate": "#d3d9df"}
SERIES_ORDER = ("blue", "amber", "teal", "plum", "slate")
DASHES = ("", "6 3", "2 3", "8 3 2 3", "1 2")
STATUS = {"healthy": "#2e7d5b", "watch": "#b87800", "act": "#b83a26"}
FONT = "'Source Sans 3', 'Segoe UI', 'Helvetica Neue', Arial, sans-serif"

WIDTH = 720
MARGIN = {"left": 64, "right": 18, "top": 34, "bottom": 48}


@dataclass
class Series:
    """One line of a line chart: x and y values, optional interval band, a colour name."""

    label: str
    x: Sequence[float]
    y: Sequence[float]
    low: Sequence[float] | None = None
    high: Sequence[float] | None = None
    colour: str | None = None
    dash: str | None = None
    step: bool = False


@dataclass
class Interval:
    """One row of an interval (dot-and-whisker) chart."""

    label: str
    estimate: float
    low: float | None = None
    high: float | None = None
    colour: str = "blue"
    note: str = ""


@dataclass
class Chart:
    """A finished chart: the SVG markup and what it shows (for the template's figure caption)."""

    svg: str
    title: str
    caption: str
    kind: str
    points: int = 0
    extra: dict = field(default_factory=dict)


def _finite(v) -> bool:
    try:
        return v is not None and math.isfinite(float(v))
    except (TypeError, ValueError):
        return False


def _ticks(low: float, high: float, count: int = 5) -> list[float]:
    """Round tick values covering [low, high]."""
    if not (_finite(low) and _finite(high)):
        return [0.0]
    if high == low:
        pad = abs(high) * 0.1 or 1.0
        low, high = low - pad, high + pad
    raw = (high - low) / max(count, 1)
    magnitude = 10 ** math.floor(math.log10(raw))
    step = min((m * magnitude for m in (1, 2, 2.5, 5, 10) if m * magnitude >= raw), default=raw)
    start = math.floor(low / step) * step
    ticks = []
    value = start
    while value <= high + step * 1e-9:
        ticks.append(round(value, 12))
        value += step
    return ticks


def _label(value: float, percent: bool = False) -> str:
    if abs(value) < 1e-12:
        value = 0.0  # no "-0"
    if percent:
        return f"{value * 100:.0f}%" if abs(value) >= 0.1 or value == 0 else f"{value * 100:.1f}%"
    if abs(value) >= 1000:
        return f"{value:,.0f}"
    if value == int(value):
        return f"{int(value)}"
    return f"{value:.3g}"


class _Frame:
    """Axes: maps data to pixels, draws grid, ticks and axis labels."""

    def __init__(self, x_range, y_range, *, height: int, x_label: str, y_label: str, y_percent=False,
                 x_percent=False, x_ticks=None, left: int | None = None, x_tick_labels: dict | None = None,
                 bottom_extra: int = 0):
        self.width = WIDTH
        self.height = height
        self.left = left or MARGIN["left"]
        self.right = self.width - MARGIN["right"]
        self.top = MARGIN["top"]
        self.bottom = height - MARGIN["bottom"] - bottom_extra
        self.label_gap = 36 + bottom_extra
        self.x_tick_labels = x_tick_labels or {}
        if x_tick_labels:
            keys = sorted(x_tick_labels)
            every = max(1, math.ceil(len(keys) / 8))
            x_ticks = keys[::every]
        self.x_ticks = list(x_ticks) if x_ticks is not None else _ticks(*x_range)
        self.y_ticks = _ticks(*y_range)
        first, last = (self.x_ticks[0], self.x_ticks[-1]) if self.x_ticks else x_range
        self.x0, self.x1 = min(first, x_range[0]), max(last, x_range[1])
        self.y0, self.y1 = min(self.y_ticks[0], y_range[0]), max(self.y_ticks[-1], y_range[1])
        if self.x1 == self.x0:
            self.x1 = self.x0 + 1
        if self.y1 == self.y0:
            self.y1 = self.y0 + 1
        self.x_label, self.y_label = x_label, y_label
        self.y_percent, self.x_percent = y_percent, x_percent

    def x(self, value: float) -> float:
        return self.left + (float(value) - self.x0) / (self.x1 - self.x0) * (self.right - self.left)

    def y(self, value: float) -> float:
        return self.bottom - (float(value) - self.y0) / (self.y1 - self.y0) * (self.bottom - self.top)

    def axes(self) -> list[str]:
        parts = []
        for t in self.y_ticks:
            y = self.y(t)
            parts.append(f'<line x1="{self.left}" x2="{self.right}" y1="{y:.1f}" y2="{y:.1f}" stroke="{GRID}"/>')
            parts.append(f'<text x="{self.left - 6}" y="{y + 4:.1f}" text-anchor="end" class="tick">'
                         f'{escape(_label(t, self.y_percent))}</text>')
        for t in self.x_ticks:
            x = self.x(t)
            parts.append(f'<line x1="{x:.1f}" x2="{x:.1f}" y1="{self.bottom}" y2="{self.bottom + 4}" stroke="{MUTED}"/>')
            shown = self.x_tick_labels.get(t, _label(t, self.x_percent))
            parts.append(f'<text x="{x:.1f}" y="{self.bottom + 17}" text-anchor="middle" class="tick">'
                         f'{escape(str(shown))}</text>')
        parts.append(f'<line x1="{self.left}" x2="{self.right}" y1="{self.bottom}" y2="{self.bottom}" stroke="{MUTED}"/>')
        parts.append(f'<text x="{(self.left + self.right) / 2:.1f}" y="{self.bottom + self.label_gap}" text-anchor="middle" '
                     f'class="axis">{escape(self.x_label)}</text>')
        parts.append(f'<text transform="translate(14 {(self.top + self.bottom) / 2:.1f}) rotate(-90)" '
                     f'text-anchor="middle" class="axis">{escape(self.y_label)}</text>')
        return parts


def _svg(body: list[str], *, height: int, title: str, caption: str, kind: str) -> str:
    style = (f"<style>text{{font-family:{FONT};fill:{INK}}} .tick{{font-size:11px;fill:{MUTED}}} "
             f".axis{{font-size:12px}} .title{{font-size:14px;font-weight:600}} .legend{{font-size:12px}} "
             f".caption{{font-size:11px;fill:{MUTED}}}</style>")
    return (f'<svg xmlns="http://www.w3.org/2000/svg" class="chart chart-{kind}" viewBox="0 0 {WIDTH} {height}" '
            f'width="{WIDTH}" height="{height}" role="img" aria-label="{escape(title)}">'
            f"<title>{escape(title)}</title>{style}"
            f'<text x="{MARGIN["left"]}" y="20" class="title">{escape(title)}</text>'
            + "".join(body) + "</svg>")


def _legend(items: list[tuple[str, str, str]], frame: _Frame) -> list[str]:
    """Legend entries (label, colour, dash) in one row at the top of the plot area."""
    parts = []
    x = frame.left + 4
    y = frame.top + 6
    for label, colour, dash in items:
        dash_attr = f' stroke-dasharray="{dash}"' if dash else ""
        parts.append(f'<line x1="{x}" x2="{x + 22}" y1="{y}" y2="{y}" stroke="{colour}" stroke-width="2.5"{dash_attr}/>')
        parts.append(f'<text x="{x + 27}" y="{y + 4}" class="legend">{escape(label)}</text>')
        x += 34 + 6.6 * len(label)
    return parts


def line_chart(series: Sequence[Series], *, title: str, caption: str, x_label: str, y_label: str,
               y_percent: bool = False, x_percent: bool = False, vlines: Sequence[tuple[float, str]] = (),
               hline: float | None = None, height: int = 330, y_min: float | None = None,
               x_tick_labels: dict | None = None) -> Chart:
    """Lines with optional interval bands (Kaplan-Meier curves, weekly series, Qini curves)."""
    xs = [float(v) for s in series for v in s.x if _finite(v)]
    ys = [float(v) for s in series for arr in (s.y, s.low or (), s.high or ()) for v in arr if _finite(v)]
    if hline is not None:
        ys.append(hline)
    if y_min is not None:
        ys.append(y_min)
    if not xs or not ys:
        raise ValueError("a line chart needs at least one finite point")
    span = (max(ys) - min(ys)) or 1.0
    frame = _Frame((min(xs), max(xs)), (min(ys), max(ys) + 0.12 * span), height=height, x_label=x_label,
                   y_label=y_label, y_percent=y_percent, x_percent=x_percent, x_tick_labels=x_tick_labels)
    body = frame.axes()
    legend = []
    points = 0
    for i, s in enumerate(series):
        colour_name = s.colour or SERIES_ORDER[i % len(SERIES_ORDER)]
        colour = PALETTE.get(colour_name, colour_name)
        tint = TINTS.get(colour_name, GRID)
        dash = s.dash if s.dash is not None else DASHES[i % len(DASHES)]
        pts = [(frame.x(x), frame.y(y)) for x, y in zip(s.x, s.y) if _finite(x) and _finite(y)]
        if s.low is not None and s.high is not None:
            band = [(x, lo, hi) for x, lo, hi in zip(s.x, s.low, s.high) if _finite(x) and _finite(lo) and _finite(hi)]
            if len(band) > 1:
                upper = " ".join(f"{frame.x(x):.1f},{frame.y(hi):.1f}" for x, _, hi in band)
                lower = " ".join(f"{frame.x(x):.1f},{frame.y(lo):.1f}" for x, lo, _ in reversed(band))
                body.append(f'<polygon points="{upper} {lower}" fill="{tint}" fill-opacity="0.4" stroke="none"/>')
        if s.step and len(pts) > 1:
            stepped = [pts[0]]
            for (x0, y0), (x1, y1) in zip(pts, pts[1:]):
                stepped += [(x1, y0), (x1, y1)]
            pts = stepped
        if len(pts) > 1:
            dash_attr = f' stroke-dasharray="{dash}"' if dash else ""
            path = " ".join(f"{x:.1f},{y:.1f}" for x, y in pts)
            body.append(f'<polyline points="{path}" fill="none" stroke="{colour}" stroke-width="2.2"{dash_attr}/>')
        elif pts:
            body.append(f'<circle cx="{pts[0][0]:.1f}" cy="{pts[0][1]:.1f}" r="3.5" fill="{colour}"/>')
        points += len(pts)
        legend.append((s.label, colour, dash))
    if hline is not None and frame.y0 <= hline <= frame.y1:
        body.append(f'<line x1="{frame.left}" x2="{frame.right}" y1="{frame.y(hline):.1f}" y2="{frame.y(hline):.1f}" '
                    f'stroke="{INK}" stroke-width="1"/>')
    for x, label in vlines:
        if frame.x0 <= x <= frame.x1:
            body.append(f'<line x1="{frame.x(x):.1f}" x2="{frame.x(x):.1f}" y1="{frame.top}" y2="{frame.bottom}" '
                        f'stroke="{MUTED}" stroke-dasharray="3 3"/>')
            body.append(f'<text x="{frame.x(x) + 4:.1f}" y="{frame.bottom - 6}" class="tick">{escape(label)}</text>')
    body += _legend(legend, frame)
    return Chart(_svg(body, height=height, title=title, caption=caption, kind="line"), title, caption, "line", points)


def interval_chart(rows: Sequence[Interval], *, title: str, caption: str, x_label: str, reference: float | None = 0.0,
                   x_percent: bool = False, log_scale: bool = False) -> Chart:
    """Dot-and-whisker chart: one row per estimate with its interval, a reference line (0 or 1)."""
    if not rows:
        raise ValueError("an interval chart needs at least one row")
    transform = (lambda v: math.log(v)) if log_scale else (lambda v: float(v))
    values = [transform(v) for r in rows for v in (r.estimate, r.low, r.high) if _finite(v) and (not log_scale or v > 0)]
    if reference is not None:
        values.append(transform(reference))
    if not values:
        raise ValueError("an interval chart needs at least one finite value")
    longest = max(len(r.label) for r in rows)
    left = min(300, max(MARGIN["left"], 14 + int(6.4 * longest)))
    row_height = 24
    height = MARGIN["top"] + MARGIN["bottom"] + row_height * len(rows) + 10
    low, high = min(values), max(values)
    pad = (high - low) * 0.08 or 0.1
    frame = _Frame((low - pad, high + pad), (0, len(rows)), height=height, x_label=x_label, y_label="",
                   x_percent=x_percent, left=left)
    if log_scale:
        nice = (0.1, 0.2, 0.25, 0.33, 0.5, 0.67, 0.75, 1.0, 1.25, 1.5, 2.0, 3.0, 4.0, 5.0, 10.0)
        inside = [math.log(v) for v in nice if low - pad <= math.log(v) <= high + pad]
        frame.x_ticks = inside if len(inside) >= 2 else _ticks(low - pad, high + pad)
    body = []
    for t in frame.x_ticks:
        x = frame.x(t)
        body.append(f'<line x1="{x:.1f}" x2="{x:.1f}" y1="{frame.top}" y2="{frame.bottom}" stroke="{GRID}"/>')
        shown = f"{math.exp(t):.2g}" if log_scale else _label(t, x_percent)
        body.append(f'<text x="{x:.1f}" y="{frame.bottom + 17}" text-anchor="middle" class="tick">{escape(shown)}</text>')
    body.append(f'<line x1="{frame.left}" x2="{frame.right}" y1="{frame.bottom}" y2="{frame.bottom}" stroke="{MUTED}"/>')
    body.append(f'<text x="{(frame.left + frame.right) / 2:.1f}" y="{frame.bottom + 36}" text-anchor="middle" '
                f'class="axis">{escape(x_label)}</text>')
    if reference is not None:
        x = frame.x(transform(reference))
        body.append(f'<line x1="{x:.1f}" x2="{x:.1f}" y1="{frame.top}" y2="{frame.bottom}" stroke="{INK}" stroke-width="1"/>')
    step = (frame.bottom - frame.top) / len(rows)
    for i, r in enumerate(rows):
        y = frame.top + step * (i + 0.5)
        colour = PALETTE.get(r.colour, r.colour)
        body.append(f'<text x="{frame.left - 8}" y="{y + 4:.1f}" text-anchor="end" class="legend">{escape(r.label)}</text>')
        if _finite(r.low) and _finite(r.high) and (not log_scale or (r.low > 0 and r.high > 0)):
            x0, x1 = frame.x(transform(r.low)), frame.x(transform(r.high))
            body.append(f'<line x1="{x0:.1f}" x2="{x1:.1f}" y1="{y:.1f}" y2="{y:.1f}" stroke="{colour}" stroke-width="2"/>')
            for xe in (x0, x1):
                body.append(f'<line x1="{xe:.1f}" x2="{xe:.1f}" y1="{y - 5:.1f}" y2="{y + 5:.1f}" stroke="{colour}" stroke-width="2"/>')
        if _finite(r.estimate) and (not log_scale or r.estimate > 0):
            body.append(f'<circle cx="{frame.x(transform(r.estimate)):.1f}" cy="{y:.1f}" r="4.5" fill="{colour}"/>')
        else:
            body.append(f'<text x="{frame.left + 6}" y="{y + 4:.1f}" class="tick">{escape(r.note or "not estimable")}</text>')
    return Chart(_svg(body, height=height, title=title, caption=caption, kind="interval"), title, caption, "interval",
                 len(rows))


def bar_chart(categories: Sequence[str], values: Sequence[float], *, title: str, caption: str, x_label: str,
              y_label: str, y_percent: bool = False, colour: str = "blue", low=None, high=None,
              height: int = 300) -> Chart:
    """Vertical bars (a distribution, effects by decile), with optional interval whiskers."""
    finite = [float(v) for v in values if _finite(v)]
    extra = [float(v) for arr in (low or (), high or ()) for v in arr if _finite(v)]
    if not finite:
        raise ValueError("a bar chart needs at least one finite value")
    lo, hi = min(finite + extra + [0.0]), max(finite + extra + [0.0])
    slanted = len(categories) > 8 and max(len(str(c)) for c in categories) > 3
    frame = _Frame((0, len(categories)), (lo, hi + 0.08 * ((hi - lo) or 1)), height=height + (36 if slanted else 0),
                   x_label=x_label, y_label=y_label, y_percent=y_percent, x_ticks=[], bottom_extra=36 if slanted else 0)
    frame.x0, frame.x1 = 0, len(categories)
    body = frame.axes()
    fill = PALETTE.get(colour, colour)
    slot = (frame.right - frame.left) / max(len(categories), 1)
    zero = frame.y(0)
    for i, (cat, v) in enumerate(zip(categories, values)):
        x = frame.left + slot * i + slot * 0.15
        if _finite(v):
            y = frame.y(v)
            body.append(f'<rect x="{x:.1f}" y="{min(y, zero):.1f}" width="{slot * 0.7:.1f}" height="{max(abs(zero - y), 0.5):.1f}" fill="{fill}"/>')
        if low is not None and high is not None and _finite(low[i]) and _finite(high[i]):
            cx = x + slot * 0.35
            body.append(f'<line x1="{cx:.1f}" x2="{cx:.1f}" y1="{frame.y(low[i]):.1f}" y2="{frame.y(high[i]):.1f}" '
                        f'stroke="{INK}" stroke-width="1.4"/>')
        if slanted:  # long labels
            cx = x + slot * 0.35
            body.append(f'<text x="{cx:.1f}" y="{frame.bottom + 12}" text-anchor="end" class="tick" '
                        f'transform="rotate(-30 {cx:.1f} {frame.bottom + 12})">{escape(str(cat))}</text>')
        else:
            body.append(f'<text x="{x + slot * 0.35:.1f}" y="{frame.bottom + 15}" text-anchor="middle" class="tick">'
                        f'{escape(str(cat))}</text>')
    body.append(f'<line x1="{frame.left}" x2="{frame.right}" y1="{zero:.1f}" y2="{zero:.1f}" stroke="{INK}"/>')
    return Chart(_svg(body, height=frame.height, title=title, caption=caption, kind="bar"), title, caption, "bar",
                 len(categories))
