"""Small inline-SVG plotting helpers: a plot area with linear scales, ticks, lines, bands, labels.

Every function returns SVG markup as a string and escapes the text and attribute values it is
given, so callers pass plain text. The markup is plain XML (no namespace prefix, no external
reference), meant to sit inside an HTML page.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from html import escape

import numpy as np

TICK_STEPS = (1.0, 2.0, 2.5, 5.0, 10.0)
"""Tick spacings per decade: round numbers an animator reads at a glance."""

LABEL_GAP_PX = 13.0
"""Smallest vertical gap between labels stacked in the right margin (about one text line)."""


def esc(text) -> str:
    """Text or attribute value safe inside XML/HTML (``& < > " '`` escaped)."""
    return escape(str(text), quote=True)


def num(value: float, digits: int = 2) -> str:
    """A number for coordinates or labels, without a '-0' and without trailing zeros."""
    text = f"{float(value):.{digits}f}"
    if "." in text:
        text = text.rstrip("0").rstrip(".")
    return "0" if text in ("-0", "") else text


@dataclass(frozen=True)
class PlotArea:
    """A rectangle of the SVG canvas mapped linearly to data ranges (y grows upwards in data).

    Attributes
    ----------
    x_min, x_max, y_min, y_max : float
        Data range shown; ``x_max > x_min`` and ``y_max > y_min``.
    width, height : float
        Canvas size in SVG pixels (the viewBox).
    left, right, top, bottom : float
        Margins in pixels around the plotting rectangle (ticks, axis titles, line labels).
    """
    x_min: float
    x_max: float
    y_min: float
    y_max: float
    width: float = 880.0
    height: float = 250.0
    left: float = 58.0
    right: float = 118.0
    top: float = 34.0
    bottom: float = 40.0

    def __post_init__(self):
        values = (self.x_min, self.x_max, self.y_min, self.y_max)
        if not all(math.isfinite(v) for v in values):
            raise ValueError(f"plot range must be finite, got {values}")
        if not (self.x_max > self.x_min and self.y_max > self.y_min):
            raise ValueError(f"plot range must not be empty, got {values}")

    @classmethod
    def around(cls, x_lo, x_hi, y_lo, y_hi, y_pad=0.06, **size) -> "PlotArea":
        """Area showing ``[x_lo, x_hi] × [y_lo, y_hi]`` with ``y_pad`` (fraction) of room above and below."""
        if not x_hi > x_lo:
            x_lo, x_hi = x_lo - 0.5, x_lo + 0.5
        span = y_hi - y_lo
        if not span > 0:
            span = max(abs(y_lo), 1.0) * 0.1
            y_lo, y_hi = y_lo - span / 2, y_hi + span / 2
        return cls(float(x_lo), float(x_hi), float(y_lo - y_pad * span), float(y_hi + y_pad * span), **size)

    @property
    def inner_width(self) -> float:
        return self.width - self.left - self.right

    @property
    def inner_height(self) -> float:
        return self.height - self.top - self.bottom

    def x_px(self, x):
        """Data x -> canvas x (scalar or array)."""
        return self.left + (np.asarray(x, dtype=float) - self.x_min) / (self.x_max - self.x_min) * self.inner_width

    def y_px(self, y):
        """Data y -> canvas y (scalar or array); larger values are drawn higher."""
        return self.top + (self.y_max - np.asarray(y, dtype=float)) / (self.y_max - self.y_min) * self.inner_height


def nice_ticks(lo: float, hi: float, target: int = 6) -> list:
    """Round tick values inside ``[lo, hi]``, about ``target`` of them."""
    if not (math.isfinite(lo) and math.isfinite(hi)) or hi <= lo:
        return [lo] if math.isfinite(lo) else []
    raw = (hi - lo) / max(target, 1)
    decade = 10.0 ** math.floor(math.log10(raw))
    step = next(s * decade for s in TICK_STEPS if s * decade >= raw)
    first = math.ceil(lo / step - 1e-9)
    last = math.floor(hi / step + 1e-9)
    return [round(k * step, 10) for k in range(first, last + 1)]


def svg_open(area: PlotArea, label: str, cls: str = "plot") -> str:
    """Opening ``<svg>`` tag with a viewBox and an accessible title."""
    return (f'<svg class="{esc(cls)}" viewBox="0 0 {num(area.width)} {num(area.height)}" '
            f'width="{num(area.width)}" height="{num(area.height)}" role="img" aria-label="{esc(label)}">'
            f'<title>{esc(label)}</title>')


def svg_close() -> str:
    return "</svg>"


def axes(area: PlotArea, x_title: str, y_title: str, y_digits: int = 2) -> str:
    """Frame, grid lines at round ticks, tick labels and axis titles."""
    parts = [f'<rect class="frame" x="{num(area.left)}" y="{num(area.top)}" '
             f'width="{num(area.inner_width)}" height="{num(area.inner_height)}"/>']
    x0, x1 = area.left, area.width - area.right
    y0, y1 = area.top, area.height - area.bottom
    for v in nice_ticks(area.x_min, area.x_max, 10):
        x = float(area.x_px(v))
        parts.append(f'<line class="grid" x1="{num(x)}" y1="{num(y0)}" x2="{num(x)}" y2="{num(y1)}"/>')
        parts.append(f'<text class="tick" x="{num(x)}" y="{num(y1 + 14)}" text-anchor="middle">{esc(num(v, 1))}</text>')
    for v in nice_ticks(area.y_min, area.y_max, 5):
        y = float(area.y_px(v))
        parts.append(f'<line class="grid" x1="{num(x0)}" y1="{num(y)}" x2="{num(x1)}" y2="{num(y)}"/>')
        parts.append(f'<text class="tick" x="{num(x0 - 6)}" y="{num(y + 4)}" text-anchor="end">'
                     f'{esc(num(v, y_digits))}</text>')
    parts.append(f'<text class="axis-title" x="{num((x0 + x1) / 2)}" y="{num(area.height - 6)}" '
                 f'text-anchor="middle">{esc(x_title)}</text>')
    yc = (y0 + y1) / 2
    parts.append(f'<text class="axis-title" x="14" y="{num(yc)}" text-anchor="middle" '
                 f'transform="rotate(-90 14 {num(yc)})">{esc(y_title)}</text>')
    return "".join(parts)


def _segments(xs, ys):
    """Runs of consecutive finite points (a missing value breaks the line instead of bridging it)."""
    xs = np.asarray([np.nan if v is None else v for v in xs], dtype=float)
    ys = np.asarray([np.nan if v is None else v for v in ys], dtype=float)
    n = min(xs.size, ys.size)
    ok = np.isfinite(xs[:n]) & np.isfinite(ys[:n])
    runs, start = [], None
    for i in range(n + 1):
        if i < n and ok[i]:
            start = i if start is None else start
        elif start is not None:
            runs.append((xs[start:i], ys[start:i]))
            start = None
    return runs


def polyline(area: PlotArea, xs, ys, cls: str, style: str = "", data: dict | None = None) -> str:
    """One ``<polyline>`` per run of finite points of (xs, ys); ``data`` adds ``data-*`` attributes."""
    extra = f' style="{esc(style)}"' if style else ""
    extra += "".join(f' data-{esc(k)}="{esc(v)}"' for k, v in (data or {}).items())
    out = []
    for x, y in _segments(xs, ys):
        px, py = area.x_px(x), area.y_px(y)
        points = " ".join(f"{num(a)},{num(b)}" for a, b in zip(px, py))
        out.append(f'<polyline class="{esc(cls)}" points="{points}"{extra}/>')
    return "".join(out)


def band(area: PlotArea, x0: float, x1: float, fill: str, cls: str, label: str = "", tip: str = "") -> str:
    """A full-height shaded interval [x0, x1] with an optional short label above the plot."""
    a = float(np.clip(area.x_px(x0), area.left, area.width - area.right))
    b = float(np.clip(area.x_px(x1), area.left, area.width - area.right))
    if b <= a:
        return ""
    title = f"<title>{esc(tip)}</title>" if tip else ""
    out = (f'<rect class="{esc(cls)}" x="{num(a)}" y="{num(area.top)}" width="{num(b - a)}" '
           f'height="{num(area.inner_height)}" fill="{esc(fill)}">{title}</rect>')
    if label and b - a >= 7 * len(label) + 4:
        out += (f'<text class="band-label" x="{num((a + b) / 2)}" y="{num(area.top - 5)}" '
                f'text-anchor="middle">{esc(label)}</text>')
    return out


def vline(area: PlotArea, x: float, cls: str, label: str = "", anchor: str = "middle") -> str:
    """A vertical marker line across the plot, labelled above it."""
    px = float(area.x_px(x))
    out = (f'<line class="{esc(cls)}" x1="{num(px)}" y1="{num(area.top)}" '
           f'x2="{num(px)}" y2="{num(area.height - area.bottom)}"/>')
    if label:
        dx = {"end": -3, "start": 3}.get(anchor, 0)
        out += (f'<text class="marker-label" x="{num(px + dx)}" y="{num(area.top - 19)}" '
                f'text-anchor="{esc(anchor)}">{esc(label)}</text>')
    return out


def hline(area: PlotArea, y: float, cls: str, label: str = "") -> str:
    """A horizontal reference line across the plot, labelled in the right margin."""
    py = float(area.y_px(y))
    out = (f'<line class="{esc(cls)}" x1="{num(area.left)}" y1="{num(py)}" '
           f'x2="{num(area.width - area.right)}" y2="{num(py)}"/>')
    if label:
        out += margin_label(area, py, label, "ref-label")
    return out


def marker(area: PlotArea, x: float, y: float, cls: str, label: str = "", r: float = 3.5) -> str:
    """A dot at (x, y) with an optional label above it."""
    px, py = float(area.x_px(x)), float(area.y_px(y))
    out = f'<circle class="{esc(cls)}" cx="{num(px)}" cy="{num(py)}" r="{num(r)}"/>'
    if label:
        out += (f'<text class="point-label" x="{num(px)}" y="{num(py - 8)}" '
                f'text-anchor="middle">{esc(label)}</text>')
    return out


def margin_label(area: PlotArea, y_px: float, text: str, cls: str = "line-label") -> str:
    """Text in the right margin at canvas height ``y_px`` (names a line without relying on colour)."""
    return (f'<text class="{esc(cls)}" x="{num(area.width - area.right + 6)}" y="{num(y_px + 4)}">'
            f'{esc(text)}</text>')


def spread(positions, gap: float = LABEL_GAP_PX, lo: float = -math.inf, hi: float = math.inf) -> list:
    """Move label positions apart to at least ``gap`` while keeping their order and the [lo, hi] range."""
    order = sorted(range(len(positions)), key=lambda i: positions[i])
    out = [float(positions[i]) for i in order]
    for k in range(len(out)):
        out[k] = max(out[k], lo if k == 0 else out[k - 1] + gap)
    for k in range(len(out) - 1, -1, -1):
        out[k] = min(out[k], hi if k == len(out) - 1 else out[k + 1] - gap)
    result = [0.0] * len(out)
    for rank, i in enumerate(order):
        result[i] = out[rank]
    return result
