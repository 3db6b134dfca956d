"""Small self-contained SVG charts for the report and the table functions: lines (Lorenz curves, trends,
differences with a band) and ranked bars.

Written by hand (no plotting library) so a report needs nothing beyond the base install and the
HTML embeds each chart inline. Every series is one ``<polyline class="series" data-label=…>``; the
Lorenz chart's equality line is ``<line class="equality">`` from (0, 0) to (1, 1), so the data can be
read back from the picture (the tests do).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from xml.sax.saxutils import escape, quoteattr

PALETTE = ("#1f5fa8", "#d1495b", "#2e933c", "#e39b1b", "#7b4fa0", "#00a3a3", "#8c564b", "#d65db1",
           "#5a5a5a", "#93b52b", "#f26b21", "#2bb7d6")
BAR_COLOUR = "#3b6ea5"
FONT = "system-ui, -apple-system, 'Segoe UI', Roboto, 'Helvetica Neue', Arial, sans-serif"


@dataclass
class Series:
    label: str
    xs: list[float]
    ys: list[float]
    colour: str
    dashed: bool = False


def colour(i: int) -> str:
    return PALETTE[i % len(PALETTE)]


def nice_ticks(lo: float, hi: float, count: int = 6) -> list[float]:
    if not (math.isfinite(lo) and math.isfinite(hi)) or hi <= lo:
        return [lo]
    raw = (hi - lo) / max(count, 1)
    mag = 10 ** math.floor(math.log10(raw))
    step = next(m * mag for m in (1, 2, 2.5, 5, 10) if m * mag >= raw)
    first = math.ceil(lo / step - 1e-9) * step
    ticks, t = [], first
    while t <= hi + step * 1e-9:
        ticks.append(round(t, 12))
        t += step
    return ticks


def _fmt(v: float) -> str:
    return f"{v:.2f}".rstrip("0").rstrip(".") if v == v else "0"


def _tick_label(v: float) -> str:
    return f"{v:g}"


class _Frame:
    """The plot area inside the chart and the mapping from data to pixels."""

    def __init__(self, width, height, x_range, y_range, left=56, right=170, top=34, bottom=46):
        self.width, self.height = width, height
        self.left, self.top = left, top
        self.w, self.h = width - left - right, height - top - bottom
        self.x0, self.x1 = x_range
        self.y0, self.y1 = y_range

    def px(self, x: float) -> float:
        return self.left + (x - self.x0) / (self.x1 - self.x0) * self.w

    def py(self, y: float) -> float:
        return self.top + (1.0 - (y - self.y0) / (self.y1 - self.y0)) * self.h


def _open(width: int, height: int, title: str, role_label: str) -> list[str]:
    return [f'<svg xmlns="http://www.w3.org/2000/svg" width="{width}" height="{height}" '
            f'viewBox="0 0 {width} {height}" role="img" aria-label={quoteattr(role_label)} '
            f'font-family={quoteattr(FONT)} font-size="12">',
            f'<rect x="0" y="0" width="{width}" height="{height}" fill="#ffffff"/>',
            f'<text x="{width / 2:.0f}" y="20" text-anchor="middle" font-size="14" font-weight="600" '
            f'fill="#222">{escape(title)}</text>']


def _axes(f: _Frame, x_ticks, y_ticks, x_labels, x_title: str, y_title: str) -> list[str]:
    out = [f'<rect class="plot-area" x="{f.left}" y="{f.top}" width="{f.w}" height="{f.h}" fill="#fbfbfd" '
           'stroke="#999" stroke-width="1"/>']
    for t in y_ticks:
        y = f.py(t)
        out.append(f'<line x1="{f.left}" y1="{y:.2f}" x2="{f.left + f.w}" y2="{y:.2f}" stroke="#e2e2e8"/>')
        out.append(f'<text x="{f.left - 6}" y="{y + 4:.2f}" text-anchor="end" fill="#444">{_tick_label(t)}</text>')
    for t, label in zip(x_ticks, x_labels):
        x = f.px(t)
        out.append(f'<line x1="{x:.2f}" y1="{f.top}" x2="{x:.2f}" y2="{f.top + f.h}" stroke="#e2e2e8"/>')
        out.append(f'<text x="{x:.2f}" y="{f.top + f.h + 16}" text-anchor="middle" fill="#444">{escape(label)}</text>')
    out.append(f'<text x="{f.left + f.w / 2:.0f}" y="{f.height - 8}" text-anchor="middle" fill="#222">'
               f'{escape(x_title)}</text>')
    out.append(f'<text transform="translate(14 {f.top + f.h / 2:.0f}) rotate(-90)" text-anchor="middle" '
               f'fill="#222">{escape(y_title)}</text>')
    return out


def _legend(f: _Frame, series: list[Series], extra: Sequence[tuple[str, str, bool]] = ()) -> list[str]:
    out, x, y = [], f.left + f.w + 14, f.top + 8
    for label, col, dashed in [(s.label, s.colour, s.dashed) for s in series] + list(extra):
        dash = ' stroke-dasharray="5 4"' if dashed else ""
        out.append(f'<line x1="{x}" y1="{y}" x2="{x + 22}" y2="{y}" stroke="{col}" stroke-width="3"{dash}/>')
        shown = label if len(label) <= 18 else label[:17] + "…"
        out.append(f'<text x="{x + 28}" y="{y + 4}" fill="#222">{escape(shown)}<title>{escape(label)}</title></text>')
        y += 18
    return out


def _polyline(f: _Frame, s: Series) -> str:
    pts = " ".join(f"{f.px(x):.2f},{f.py(y):.2f}" for x, y in zip(s.xs, s.ys) if y == y)
    dash = ' stroke-dasharray="6 4"' if s.dashed else ""
    return (f'<polyline class="series" data-label={quoteattr(s.label)} points="{pts}" fill="none" '
            f'stroke="{s.colour}" stroke-width="2.5" stroke-linejoin="round"{dash}/>')


def lorenz_chart(series: list[Series], title: str, *, width: int = 640, height: int = 460,
                 x_title: str = "cumulative share of the population (poorest first)",
                 y_title: str = "cumulative share of the total") -> str:
    ys = [y for s in series for y in s.ys if y == y]
    y0, y1 = min([0.0] + ys), max([1.0] + ys)
    f = _Frame(width, height, (0.0, 1.0), (y0, y1))
    ticks = [0.0, 0.2, 0.4, 0.6, 0.8, 1.0]
    out = _open(width, height, title, title)
    out += _axes(f, ticks, nice_ticks(y0, y1), [_tick_label(t) for t in ticks], x_title, y_title)
    out.append(f'<line class="equality" x1="{f.px(0):.2f}" y1="{f.py(0):.2f}" x2="{f.px(1):.2f}" '
               f'y2="{f.py(1):.2f}" stroke="#888" stroke-width="1.5" stroke-dasharray="4 3"/>')
    out += [_polyline(f, s) for s in series]
    out += _legend(f, series, [("equality", "#888", True)])
    out.append("</svg>")
    return "\n".join(out)


def trend_chart(series: list[Series], periods: list[str], title: str, y_title: str, *, width: int = 640,
                height: int = 400) -> str:
    """Lines over periods shown evenly spaced (x = 0, 1, … is the period's position)."""
    ys = [y for s in series for y in s.ys if y == y]
    lo, hi = (min(ys), max(ys)) if ys else (0.0, 1.0)
    pad = (hi - lo) * 0.1 or max(abs(hi) * 0.05, 0.01)
    y0, y1 = lo - pad, hi + pad
    n = max(len(periods) - 1, 1)
    f = _Frame(width, height, (-0.3, n + 0.3), (y0, y1))
    out = _open(width, height, title, title)
    step = max(1, math.ceil(len(periods) / 10))
    shown = list(range(0, len(periods), step))
    out += _axes(f, shown, nice_ticks(y0, y1), [periods[i] for i in shown], "", y_title)
    for s in series:
        out.append(_polyline(f, s))
        for x, y in zip(s.xs, s.ys):
            if y == y:
                out.append(f'<circle cx="{f.px(x):.2f}" cy="{f.py(y):.2f}" r="3.5" fill="{s.colour}"/>')
    out += _legend(f, series)
    out.append("</svg>")
    return "\n".join(out)


def bar_chart(items: list[tuple[str, float]], title: str, value_title: str, *, ranks: list[str] | None = None,
              width: int = 640, bar: int = 22) -> str:
    """Horizontal bars in the order given (the ranking), each with its value written beside it;
    ``ranks`` are written before the labels (default 1, 2, …)."""
    ranks = ranks if ranks is not None else [str(i + 1) for i in range(len(items))]
    left, right, top = 170, 70, 36
    height = top + bar * len(items) + 40
    values = [v for _, v in items if v == v]
    hi = max(values + [0.0]) or 1.0
    lo = min(values + [0.0])
    scale = (width - left - right) / (hi - lo if hi > lo else 1.0)
    zero = left + (0.0 - lo) * scale
    out = _open(width, height, title, title)
    for i, (label, v) in enumerate(items):
        y = top + i * bar
        shown = label if len(label) <= 24 else label[:23] + "…"
        out.append(f'<text x="{left - 8}" y="{y + bar * 0.68:.1f}" text-anchor="end" fill="#222">'
                   f'{escape(ranks[i])}. {escape(shown)}</text>')
        if v == v:
            x, w = (zero, v * scale) if v >= 0 else (zero + v * scale, -v * scale)
            out.append(f'<rect class="bar" data-label={quoteattr(label)} data-value="{v!r}" x="{x:.2f}" '
                       f'y="{y + 3}" width="{w:.2f}" height="{bar - 6}" fill="{BAR_COLOUR}"/>')
            out.append(f'<text x="{max(x + w, zero) + 6:.2f}" y="{y + bar * 0.68:.1f}" fill="#222">{v:.3f}</text>')
        else:
            out.append(f'<text x="{zero + 6:.2f}" y="{y + bar * 0.68:.1f}" fill="#888">undefined</text>')
    axis_y = top + bar * len(items) + 4
    out.append(f'<line x1="{zero:.2f}" y1="{top - 2}" x2="{zero:.2f}" y2="{axis_y}" stroke="#666"/>')
    out.append(f'<text x="{left + (width - left - right) / 2:.0f}" y="{axis_y + 24}" text-anchor="middle" '
               f'fill="#222">{escape(value_title)}</text>')
    out.append("</svg>")
    return "\n".join(out)


def difference_chart(ps: list[float], diff: list[float], lo: list[float], hi: list[float], title: str, *,
                     label: str = "difference", width: int = 640, height: int = 420,
                     y_title: str = "difference of the ordinates (A − B)") -> str:
    """A difference of two curves over p with its band: the band is ``<polygon class="band">``
    (upper ends left to right, lower ends back), the difference a ``series`` polyline, and the zero
    line ``<line class="zero">`` (above it: A's curve lies higher)."""
    known = [i for i in range(len(ps)) if diff[i] == diff[i] and lo[i] == lo[i] and hi[i] == hi[i]]
    ys = [0.0] + [lo[i] for i in known] + [hi[i] for i in known]
    top, bottom = max(ys), min(ys)
    pad = (top - bottom) * 0.08 or 0.01
    f = _Frame(width, height, (0.0, 1.0), (bottom - pad, top + pad))
    out = _open(width, height, title, title)
    ticks = nice_ticks(bottom - pad, top + pad)
    out += _axes(f, [i / 5 for i in range(6)], [t for t in ticks if bottom - pad <= t <= top + pad],
                 [_tick_label(i / 5) for i in range(6)], "cumulative share of the population (poorest first)", y_title)
    band = [(ps[i], hi[i]) for i in known] + [(ps[i], lo[i]) for i in reversed(known)]
    out.append('<polygon class="band" points="' + " ".join(f"{f.px(x):.2f},{f.py(y):.2f}" for x, y in band)
               + '" fill="#1f5fa8" fill-opacity="0.18" stroke="none"/>')
    out.append(f'<line class="zero" x1="{f.px(0):.2f}" y1="{f.py(0):.2f}" x2="{f.px(1):.2f}" y2="{f.py(0):.2f}" '
               'stroke="#555" stroke-width="1.2" stroke-dasharray="4 3"/>')
    out.append(_polyline(f, Series(label, [ps[i] for i in known], [diff[i] for i in known], PALETTE[0])))
    out += _legend(f, [Series(label, [], [], PALETTE[0])], [("simultaneous band", "#a9c1e0", False)])
    out.append("</svg>")
    return "\n".join(out)
