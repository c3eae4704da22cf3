"""Bar charts drawn on the server as SVG: shares of FTB (horizontal bars about zero) and the FTB
histogram of a lot against its limit.

Every bar carries its value as text beside it, so a reader needs neither colour nor a ruler; a
negative share (a group that pulls the mean FTB back) is drawn left of zero and hatched.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from html import escape

from markupsafe import Markup

from app.views.charts import FAN, LIMIT, SIDE_A, fmt, nice_step, svg_document


@dataclass(frozen=True)
class Bar:
    label: str
    value: float
    note: str = ""  # read out in the bar's tooltip


def _hatch(ident: str) -> str:
    return (f'<defs><pattern id="{ident}-hatch" width="6" height="6" '
            f'patternUnits="userSpaceOnUse" patternTransform="rotate(45)">'
            f'<rect width="6" height="6" fill="#fff"/><line x1="0" y1="0" x2="0" y2="6" '
            f'stroke="{SIDE_A}" stroke-width="3"/></pattern></defs>')


def bar_chart_svg(bars: Sequence[Bar], *, title: str, axis_label: str, ident: str,
                  unit: str = "%", label_width: int = 130, width: int = 620) -> Markup:
    """One horizontal bar per entry, about a zero line, with its value written beside it."""
    row_h, top = 20, 10
    plot_h = max(1, len(bars)) * row_h
    left, right = label_width, width - 56
    lo = min([0.0, *(b.value for b in bars)])
    hi = max([0.0, *(b.value for b in bars)])
    step = nice_step((hi - lo) or 1.0, 5)
    lo, hi = step * math.floor(lo / step), step * math.ceil(hi / step) or step

    def x(v: float) -> float:
        return left + (right - left) * (v - lo) / (hi - lo)

    body = [_hatch(ident)]
    for i in range(round((hi - lo) / step) + 1):
        v = lo + i * step
        body.append(f'<line x1="{x(v):.1f}" x2="{x(v):.1f}" y1="{top}" y2="{top + plot_h}" '
                    f'stroke="#e1e4e8"/><text x="{x(v):.1f}" y="{top + plot_h + 15}" '
                    f'text-anchor="middle" font-size="11">{fmt(v)}</text>')
    for n, b in enumerate(bars):
        y = top + n * row_h
        x0, x1 = sorted((x(0.0), x(b.value)))
        fill = SIDE_A if b.value >= 0 else f"url(#{ident}-hatch)"
        tip = f"{b.label}: {b.value:.1f} {unit}" + (f"; {b.note}" if b.note else "")
        text_x, anchor = (x1 + 4, "start") if b.value >= 0 else (x0 - 4, "end")
        body.append(f'<text x="{left - 6}" y="{y + 14}" text-anchor="end" font-size="11">'
                    f'{escape(b.label)}</text>'
                    f'<rect class="bar" x="{x0:.1f}" y="{y + 3}" width="{max(x1 - x0, 0.5):.1f}" '
                    f'height="{row_h - 6}" fill="{fill}" stroke="{SIDE_A}" '
                    f'data-value="{b.value:.4g}"><title>{escape(tip)}</title></rect>'
                    f'<text x="{text_x:.1f}" y="{y + 14}" text-anchor="{anchor}" '
                    f'font-size="10">{b.value:.1f}</text>')
    body.append(f'<line class="zero-line" x1="{x(0.0):.1f}" x2="{x(0.0):.1f}" y1="{top}" '
                f'y2="{top + plot_h}" stroke="#1b2430" stroke-width="1.2"/>'
                f'<text x="{(left + right) / 2:.1f}" y="{top + plot_h + 33}" '
                f'text-anchor="middle" font-size="12">{escape(axis_label)}</text>')
    negative = sum(b.value < 0 for b in bars)
    desc = (f"{len(bars)} bars, largest {max((b.value for b in bars), default=0):.1f} {unit}"
            + (f"; {negative} negative, hatched, left of zero" if negative else "") + ".")
    return svg_document(width, int(top + plot_h + 42), title, desc, body, ident=ident,
                        css_class="chart bars")


@dataclass(frozen=True)
class Bin:
    start: float
    end: float
    count: int


def histogram_bins(values: Sequence[float], *, limit: float, target: int = 12) -> list[Bin]:
    """Equal bins of a 1, 2 or 5 step from zero to past the largest value and the limit (the
    limit always falls on a bin edge or inside the drawn range)."""
    top = max([limit, *values]) * 1.02
    step = nice_step(top, target)
    n = max(1, math.ceil(top / step))
    counts = [0] * n
    for v in values:
        counts[min(n - 1, max(0, int(v // step)))] += 1
    return [Bin(i * step, (i + 1) * step, c) for i, c in enumerate(counts)]


def histogram_svg(values: Sequence[float], *, limit: float, title: str, axis_label: str,
                  ident: str, limit_label: str = "limit") -> Markup:
    """Counts of ``values`` in equal bins, one bar per bin, with the limit as a vertical line."""
    bins = histogram_bins(values, limit=limit)
    left, top, width, height = 56, 16, 540, 200
    x_max = bins[-1].end
    y_step = nice_step(max(b.count for b in bins) or 1, 5)
    y_step = max(1.0, float(math.ceil(y_step)))
    # One step of headroom above the tallest bar for its count.
    y_max = y_step * (math.floor(max(b.count for b in bins) / y_step) + 1)

    def x(v: float) -> float:
        return left + width * v / x_max

    def y(c: float) -> float:
        return top + height * (1 - c / y_max)

    body = []
    for i in range(int(y_max / y_step) + 1):
        c = i * y_step
        body.append(f'<line x1="{left}" x2="{left + width}" y1="{y(c):.1f}" y2="{y(c):.1f}" '
                    f'stroke="#e1e4e8"/><text x="{left - 6}" y="{y(c) + 4:.1f}" '
                    f'text-anchor="end" font-size="11">{c:.0f}</text>')
    for b in bins:
        body.append(f'<rect class="bin" x="{x(b.start) + 1:.1f}" y="{y(b.count):.1f}" '
                    f'width="{x(b.end) - x(b.start) - 2:.1f}" height="{y(0) - y(b.count):.1f}" '
                    f'fill="{FAN}" stroke="#4a5562" data-count="{b.count}"><title>'
                    f"{fmt(b.start)} to {fmt(b.end)} µm: {b.count} panel"
                    f"{'s' if b.count != 1 else ''}</title></rect>")
        if b.count:
            body.append(f'<text x="{(x(b.start) + x(b.end)) / 2:.1f}" y="{y(b.count) - 4:.1f}" '
                        f'text-anchor="middle" font-size="10">{b.count}</text>')
    for edge in {b.start for b in bins[::2]} | {x_max}:
        body.append(f'<text x="{x(edge):.1f}" y="{top + height + 16}" text-anchor="middle" '
                    f'font-size="11">{fmt(edge)}</text>')
    body.append(f'<rect x="{left}" y="{top}" width="{width}" height="{height}" fill="none" '
                f'stroke="#7a838d"/><line class="limit-line" x1="{x(limit):.1f}" '
                f'x2="{x(limit):.1f}" y1="{top}" y2="{top + height}" stroke="{LIMIT}" '
                f'stroke-width="2" stroke-dasharray="8 4"/><text x="{x(limit) - 4:.1f}" '
                f'y="{top + 12}" text-anchor="end" font-size="11" fill="{LIMIT}">'
                f"{escape(limit_label)} {fmt(limit)} µm</text>"
                f'<text x="{left + width / 2}" y="{top + height + 34}" text-anchor="middle" '
                f'font-size="12">{escape(axis_label)}</text>'
                f'<text transform="translate(16 {top + height / 2}) rotate(-90)" '
                f'text-anchor="middle" font-size="12">Panels (count)</text>')
    over = sum(v > limit for v in values)
    desc = (f"{len(values)} panels in {len(bins)} bins of {fmt(bins[0].end)} µm; {over} above "
            f"the limit of {fmt(limit)} µm.")
    return svg_document(620, top + height + 44, title, desc, body, ident=ident,
                        css_class="chart histogram")
