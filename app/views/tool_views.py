"""What the analysis pages draw from the services' reports: a tool fingerprint as site vectors
and a terms table, shares of FTB as bars, and the links of an alarm.

A fingerprint's systematic site vectors are its mean terms evaluated at the product's check
points with the per-layer model (``app.overlay.model.evaluate``; docs/conventions.md):
dx = Tx + Sx x - Ox y + Kx x y, dy = Ty + Sy y + Oy x + Ky x y. They are drawn in the tool's own
frame, as the fingerprint is: for side B that is the panel seen from side B.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from app.overlay.model import evaluate
from app.schemas.analysis import (
    Contribution,
    DriftAlarm,
    DriftChart,
    FingerprintRow,
    LotToolShares,
    TermFigure,
    VarianceComponent,
)
from app.views.bars import Bar
from app.views.charts import Arrow
from app.views.terms import TERM_UNITS


def _raw(figures: Sequence[TermFigure]) -> np.ndarray:
    """Terms in ``TERM_NAMES`` order; a term without a mean (too few runs) counts as zero."""
    return np.array([f.mean if f.mean is not None else 0.0 for f in figures])


def fingerprint_arrows(figures: Sequence[TermFigure],
                       points_mm: Sequence[tuple[float, float]]) -> list[Arrow]:
    """One arrow per check point: the displacement the terms give there (µm)."""
    pts = np.asarray(points_mm, dtype=np.float64).reshape(-1, 2)
    dx, dy = evaluate(_raw(figures), pts[:, 0], pts[:, 1])
    return [Arrow(float(x), float(y), float(a), float(b)) for (x, y), a, b in
            zip(pts, dx, dy, strict=True)]


@dataclass(frozen=True)
class TermRow:
    term: str
    words: str
    unit: str
    tool: tuple[float | None, float | None]  # mean, interval half-width, reported unit
    rest: tuple[float | None, float | None]
    difference: tuple[float | None, float | None]

    @property
    def stands_out(self) -> bool:
        """The difference's interval excludes zero."""
        mean, half = self.difference
        return mean is not None and half is not None and abs(mean) > half


def term_rows(row: FingerprintRow, *, model_terms: int = 8) -> list[TermRow]:
    """The terms table of one fingerprint, in reported units (without the trapezoid terms
    when the product fits six terms: they are zero by construction, not measured)."""
    out = []
    for own, rest, diff in zip(row.terms_facing_side[:model_terms],
                               row.rest_facing_side[:model_terms],
                               row.difference_facing_side[:model_terms], strict=True):
        u = TERM_UNITS[own.term]
        out.append(TermRow(own.term, u.words, u.unit,
                           (u.shown(own.mean), u.shown(own.half_width)),
                           (u.shown(rest.mean), u.shown(rest.half_width)),
                           (u.shown(diff.mean), u.shown(diff.half_width))))
    return out


def share_bars(rows: Sequence[Contribution], *, prefix: str = "") -> list[Bar]:
    """One bar per group: its share of the mean FTB, in per cent."""
    return [Bar(f"{prefix}{r.group}", 100.0 * r.share,
                f"{r.runs} runs, ({r.dx_um:.1f}, {r.dy_um:.1f}) µm") for r in rows]


def lot_share_bars(lots: Sequence[LotToolShares]) -> list[Bar]:
    """Per lot, one bar per tool: the tool's share of that lot's mean FTB."""
    return [bar for lot in lots for bar in share_bars(lot.by_exposure_tool, prefix=f"{lot.lot} · ")]


def component_bars(components: Sequence[VarianceComponent]) -> list[Bar]:
    return [Bar(c.source, 100.0 * c.share, f"{c.variance_um2:.2f} µm², {c.groups} groups")
            for c in components]


def chart_of(alarm: DriftAlarm, charts: Sequence[DriftChart]) -> DriftChart | None:
    key = (alarm.exposure_tool, alarm.side, alarm.term)
    return next((c for c in charts if (c.exposure_tool, c.side, c.term) == key), None)


def lots_since_change(alarm: DriftAlarm, charts: Sequence[DriftChart]) -> list[str]:
    """The lots whose subgroups on the alarm's chart ran at or after the change start, in
    time order: the lots to look at."""
    chart = chart_of(alarm, charts)
    if chart is None:
        return []
    seen: dict[str, None] = {}
    for p in sorted(chart.points, key=lambda p: p.at):
        if p.at >= alarm.change_start:
            seen.setdefault(p.lot)
    return list(seen)
