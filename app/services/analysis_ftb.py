"""Shares of FTB for the panels of a product in a window.

The panels are those with a run in the window (and the filter's tool, side, layer, lot); each
enters with its whole current stack, and only panels with layers on both sides (they have an
FTB). At the worst check point (largest |mean FTB| + 3 sigma, ``overlay.attribution.spread``):

- each layer and side's, and each tool's, contribution to the mean FTB vector and its share
  (projection on the mean vector; shares add to 1), and the same by tool within each lot;
- the variance of the layer runs' FTB contributions (sign * model at the point, along the mean
  FTB direction, the mean of each layer and side taken out) split by ANOVA into exposure tool,
  lot on that tool, panel in that lot and layer scatter (``overlay.components``).
"""

from __future__ import annotations

import numpy as np

from app.db import Database
from app.errors import InvalidInput
from app.overlay.attribution import along, contributions, panel_ftb_terms, spread
from app.overlay.components import variance_components
from app.overlay.model import evaluate
from app.schemas.analysis import (
    AnalysisFilter,
    Contribution,
    LotToolShares,
    ShareReport,
    VarianceComponent,
)
from app.services.analysis_data import (
    Runs,
    both_sides,
    selected_panels,
    stacks,
    whole_panels,
    window_runs,
)

SOURCES = ("exposure tool", "lot", "panel within lot", "layer scatter")


def _contribution_rows(runs: Runs, group: np.ndarray, labels: list[str], n_panels: int,
                       point: tuple[float, float]) -> list[Contribution]:
    c = contributions(runs.terms, runs.sign, group, len(labels), n_panels, *point)
    rows = [Contribution(group=label, runs=int(c.count[i]), dx_um=float(c.dx[i]),
                         dy_um=float(c.dy[i]), share=float(c.share[i]))
            for i, label in enumerate(labels) if c.count[i] > 0]
    rows.sort(key=lambda r: r.share, reverse=True)
    return rows


def _by_lot(runs: Runs, point: tuple[float, float]) -> list[LotToolShares]:
    out = []
    for code in np.unique(runs.lot):
        sub = runs.subset(runs.lot == code)
        n = len(sub.panels)
        rows = _contribution_rows(sub, sub.tool, list(sub.tools), n, point)
        mean = (sum(r.dx_um for r in rows), sum(r.dy_um for r in rows))
        out.append(LotToolShares(lot=runs.lots[code], panels=n, mean_ftb_um=mean,
                                   by_exposure_tool=rows))
    return out


def _components(runs: Runs, point: tuple[float, float],
                direction: tuple[float, float]) -> list[VarianceComponent]:
    dx, dy = evaluate(runs.terms, np.array([point[0]]), np.array([point[1]]))
    value = along(runs.sign * dx[:, 0], runs.sign * dy[:, 0], direction)
    # The systematic part of each layer and side is the shares' business: take it out.
    cell = runs.side_b.astype(np.int64) * 1000 + runs.layer
    _, inverse = np.unique(cell, return_inverse=True)
    means = np.bincount(inverse, weights=value) / np.bincount(inverse)
    est = variance_components(value - means[inverse], [runs.tool, runs.lot, runs.panel],
                              absorbed=int(means.size) - 1)
    return [VarianceComponent(source=name, variance_um2=float(v), share=float(s),
                              truncated=bool(t), groups=int(g))
            for name, v, s, t, g in zip(SOURCES, est.variances, est.shares, est.truncated,
                                        est.groups, strict=True)]


def ftb_shares(*, db: Database, filters: AnalysisFilter) -> ShareReport:
    """Contributions to the mean FTB at the worst check point, and its variance components."""
    with db.reading() as session:
        info, window = window_runs(session, filters)
        stack = (stacks(session, info, selected_panels(window))
                 if window.size and not whole_panels(filters) else window)
    runs = stack.subset(both_sides(stack)) if stack.size else stack
    n_panels = len(runs.panels)
    if n_panels < 2:
        raise InvalidInput("shares need at least two panels with layers on both sides in the "
                           "window; widen the window or the filter")
    ftb = spread(panel_ftb_terms(runs.terms, runs.sign, runs.panel, n_panels),
                 info.check_x, info.check_y)
    w = ftb.worst
    point = (float(info.check_x[w]), float(info.check_y[w]))
    mean = (float(ftb.mean_dx[w]), float(ftb.mean_dy[w]))
    layer_side = runs.side_b.astype(np.int64) * 100 + runs.layer
    codes, inverse = np.unique(layer_side, return_inverse=True)
    labels = [f"L{c % 100} {'B' if c >= 100 else 'A'}" for c in codes]
    return ShareReport(
        product=info.code, panels=n_panels, worst_point_mm=point, mean_ftb_um=mean,
        ftb_3sigma_um=ftb.worst_figure,
        by_layer_side=_contribution_rows(runs, inverse.astype(np.int64), labels, n_panels,
                                         point),
        by_exposure_tool=_contribution_rows(runs, runs.tool, list(runs.tools), n_panels, point),
        by_lot=_by_lot(runs, point),
        components=_components(runs, point, mean),
    )
