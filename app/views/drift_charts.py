"""The EWMA chart of one exposure tool, side and term, drawn on the server as SVG.

One EWMA point per subgroup (the panels of one lot that ran one layer and side on the tool),
the subgroup means behind it, the centre line and both control limits, all in the term's
reported unit (``app.views.terms``). A point is an alarm when its EWMA lies beyond a limit or a
run rule fired there (``app.services.analysis_drift``); an alarm is drawn as a triangle instead
of a circle and carries the word "alarm" (text and shape, never colour alone: WCAG 2.2, 1.4.1).
"""

from __future__ import annotations

import math
import re
from collections.abc import Sequence
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta
from html import escape

from markupsafe import Markup

from app.schemas.analysis import DriftChart, DriftPoint
from app.views.charts import FAN, FTB, LIMIT, SIDE_A, fmt, marker, nice_step, svg_document
from app.views.terms import TERM_UNITS, term_label

DAY = 86400.0
_DAY_STEPS = (1, 2, 5, 7, 14, 28)


def is_alarm(p: DriftPoint) -> bool:
    """The EWMA beyond a control limit, or a run rule fired at this point."""
    return p.ewma > p.upper or p.ewma < p.lower or bool(p.rules)


def chart_ident(tool: str, side: str, term: str) -> str:
    """A chart's element id, also the fragment the alarm list links to."""
    return re.sub(r"[^a-z0-9-]", "-", f"ewma-{tool}-{side}-{term}".lower())


@dataclass(frozen=True)
class _Axes:
    left: float
    top: float
    width: float
    height: float
    t0: float
    t1: float
    y0: float
    y1: float

    def x(self, seconds: float) -> float:
        return self.left + self.width * (seconds - self.t0) / (self.t1 - self.t0)

    def y(self, value: float) -> float:
        return self.top + self.height * (1 - (value - self.y0) / (self.y1 - self.y0))


def _day_ticks(t0: float, t1: float) -> list[float]:
    """Midnights (UTC) between t0 and t1, a 1, 2, 5, 7, 14 or 28-day step apart, at most 8."""
    days = (t1 - t0) / DAY
    step = next((s for s in _DAY_STEPS if days / s <= 8), _DAY_STEPS[-1])
    start = datetime.fromtimestamp(t0, tz=UTC).replace(hour=0, minute=0, second=0,
                                                        microsecond=0) + timedelta(days=1)
    out = []
    while start.timestamp() <= t1:
        out.append(start.timestamp())
        start += timedelta(days=step)
    return out


def _line(a: _Axes, pts: Sequence[tuple[float, float]], colour: str, css: str, dash: str = "",
          width: float = 1.6) -> str:
    coords = " ".join(f"{a.x(t):.1f},{a.y(v):.1f}" for t, v in pts)
    dashing = f' stroke-dasharray="{dash}"' if dash else ""
    return (f'<polyline class="{css}" points="{coords}" fill="none" stroke="{colour}" '
            f'stroke-width="{width}"{dashing}/>')


def _frame(shown: list[tuple[float, DriftPoint, tuple[float, ...]]]
           ) -> tuple[_Axes, float]:
    values = [v for _, _, vs in shown for v in vs]
    lo, hi = min(values), max(values)
    pad = (hi - lo) * 0.06 or 1.0
    step = nice_step(hi - lo + 2 * pad, 5)
    t0, t1 = shown[0][0], shown[-1][0]
    if t1 - t0 < DAY:
        t0, t1 = t0 - DAY / 2, t1 + DAY / 2
    margin = (t1 - t0) * 0.03
    return _Axes(left=74, top=14, width=536, height=190, t0=t0 - margin, t1=t1 + margin,
                 y0=step * math.floor((lo - pad) / step),
                 y1=step * math.ceil((hi + pad) / step)), step


def ewma_chart_svg(chart: DriftChart, *, ident: str | None = None) -> Markup:
    """EWMA points, subgroup means, centre line, control limits and alarm marks over time."""
    ident = ident or chart_ident(chart.exposure_tool, chart.side, chart.term)
    unit = TERM_UNITS[chart.term]
    k = unit.factor

    def row(p: DriftPoint) -> tuple[float, DriftPoint, tuple[float, ...]]:
        return (p.at.timestamp(), p, (p.mean_facing_side * k, p.ewma * k, p.lower * k,
                                      p.upper * k, chart.centre * k))

    shown = [row(p) for p in sorted(chart.points, key=lambda p: p.at)]
    if not shown:
        return svg_document(640, 60, f"EWMA chart {chart.exposure_tool} side {chart.side} "
                            f"{chart.term}", "No subgroup in the window.",
                            ['<text x="10" y="30" font-size="12">No subgroup in the window.'
                             '</text>'], ident=ident, css_class="chart ewma")
    a, step = _frame(shown)
    body: list[str] = []
    for i in range(round((a.y1 - a.y0) / step) + 1):
        yv = a.y0 + i * step
        body.append(f'<line x1="{a.left}" x2="{a.left + a.width}" y1="{a.y(yv):.1f}" '
                    f'y2="{a.y(yv):.1f}" stroke="#e1e4e8"/><text x="{a.left - 6}" '
                    f'y="{a.y(yv) + 4:.1f}" text-anchor="end" font-size="11">'
                    f"{fmt_tick(yv, step)}</text>")
    for t in _day_ticks(a.t0, a.t1):
        label = datetime.fromtimestamp(t, tz=UTC).strftime("%m-%d")
        body.append(f'<line x1="{a.x(t):.1f}" x2="{a.x(t):.1f}" y1="{a.top + a.height}" '
                    f'y2="{a.top + a.height + 4}" stroke="#7a838d"/><text x="{a.x(t):.1f}" '
                    f'y="{a.top + a.height + 16}" text-anchor="middle" font-size="11">'
                    f"{label}</text>")
    body.append(f'<rect x="{a.left}" y="{a.top}" width="{a.width}" height="{a.height}" '
                f'fill="none" stroke="#7a838d"/>')
    year = datetime.fromtimestamp(shown[0][0], tz=UTC).year
    body.append(f'<text x="{a.left + a.width / 2}" y="{a.top + a.height + 34}" '
                f'text-anchor="middle" font-size="12">Measured (UTC date, month-day, {year})'
                f'</text><text transform="translate(16 {a.top + a.height / 2}) rotate(-90)" '
                f'text-anchor="middle" font-size="12">{escape(term_label(chart.term))}</text>')
    centre = chart.centre * k
    body.append(f'<line class="centre-line" x1="{a.left}" x2="{a.left + a.width}" '
                f'y1="{a.y(centre):.1f}" y2="{a.y(centre):.1f}" stroke="{FTB}" '
                f'stroke-width="1.2"/>')
    body.append(_line(a, [(t, vs[3]) for t, _, vs in shown], LIMIT, "limit-line upper-limit",
                      "8 4", 2.0))
    body.append(_line(a, [(t, vs[2]) for t, _, vs in shown], LIMIT, "limit-line lower-limit",
                      "8 4", 2.0))
    body += [f'<circle class="subgroup-mean" cx="{a.x(t):.1f}" cy="{a.y(vs[0]):.1f}" r="2.5" '
             f'fill="none" stroke="{FAN}"><title>Lot {escape(p.lot)} layer {p.layer}, '
             f"{p.panels} panels: mean {fmt_value(vs[0])} {unit.unit}</title></circle>"
             for t, p, vs in shown]
    body.append(_line(a, [(t, vs[1]) for t, _, vs in shown], SIDE_A, "ewma-line"))
    previous = False
    for t, p, vs in shown:
        alarm = is_alarm(p)
        tip = (f"{p.at:%Y-%m-%d %H:%M} UTC, lot {p.lot} layer {p.layer}: EWMA "
               f"{fmt_value(vs[1])} {unit.unit}, limits {fmt_value(vs[2])} to "
               f"{fmt_value(vs[3])}" + (f"; alarm: {', '.join(p.rules) or 'beyond a limit'}"
                                        if alarm else ""))
        css = "ewma-point alarm-mark" if alarm else "ewma-point"
        body.append(marker("triangle" if alarm else "circle", a.x(t), a.y(vs[1]),
                           LIMIT if alarm else SIDE_A, css, tip))
        if alarm and not previous:
            body.append(f'<text class="alarm-text" x="{a.x(t):.1f}" y="{a.y(vs[1]) - 9:.1f}" '
                        f'text-anchor="middle" font-size="10" font-weight="700" '
                        f'fill="{LIMIT}">alarm</text>')
        previous = alarm
    body.append(_legend(a.left, a.top + a.height + 54))
    alarms = sum(is_alarm(p) for _, p, _ in shown)
    desc = (f"{len(shown)} EWMA points of {chart.term} ({unit.unit}) for exposure tool "
            f"{chart.exposure_tool}, "
            f"side {chart.side}, centre {fmt_value(centre)} {unit.unit}; {alarms} alarm "
            f"point{'s' if alarms != 1 else ''}, drawn as triangles marked 'alarm'.")
    return svg_document(640, 282,
                        f"EWMA chart: {chart.exposure_tool} side {chart.side} {chart.term}",
                        desc, body, ident=ident, css_class="chart ewma")


def _legend(x: float, y: float) -> str:
    items = [
        (marker("circle", x + 8, y - 3, SIDE_A, "legend-mark", "EWMA"), "EWMA point"),
        (marker("triangle", x + 8, y - 3, LIMIT, "legend-mark", "Alarm"), "alarm (▲, 'alarm')"),
        (f'<circle cx="{x + 8}" cy="{y - 3}" r="2.5" fill="none" stroke="{FAN}"/>',
         "subgroup mean"),
        (f'<line x1="{x}" x2="{x + 18}" y1="{y - 3}" y2="{y - 3}" stroke="{FTB}"/>', "centre"),
        (f'<line x1="{x}" x2="{x + 18}" y1="{y - 3}" y2="{y - 3}" stroke="{LIMIT}" '
         f'stroke-width="2" stroke-dasharray="8 4"/>', "control limits"),
    ]
    out, dx = [], 0.0
    for mark, label in items:
        out.append(f'<g transform="translate({dx:.0f} 0)">{mark}<text x="{x + 24}" y="{y + 1}" '
                   f'font-size="11">{escape(label)}</text></g>')
        dx += 36 + 6.0 * len(label)
    return "".join(out)


def fmt_value(v: float) -> str:
    """Three significant figures (terms span µm to µm/m²)."""
    return f"{v:.3g}"


def fmt_tick(v: float, step: float) -> str:
    """A tick label with just the decimals its step needs."""
    decimals = max(0, -math.floor(math.log10(step))) if step < 1 else 0
    return f"{v:.{decimals}f}" if decimals else fmt(v)
