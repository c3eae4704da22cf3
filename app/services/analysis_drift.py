"""Drift of the exposure tools of one product: EWMA charts per tool, side and term in the tool's
own frame, the Western Electric rules on lot subgroups, and an alarm list with the estimated
start of each change (``overlay.drift``).

What is charted: each run's terms in its tool's own frame. One point per subgroup: the panels of
one lot that ran one layer and side on the tool. The centre is the median of the tools' means in
the baseline window (so one tool already off then does not move it); the spread is the lot-to-lot
and panel-to-panel scatter about each tool's own baseline mean. Each subgroup mean is
standardised with its own sigma (subgroups differ in size) and the chart decides on the
standardised values; the EWMA and limits shown in raw units are scaled with the sigma of a
subgroup of median size. The change start is shared by the alarms of one tool and term family
(translation, scale, rotation, trapezoid) on both sides (``overlay.drift.common_change_start``).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from app.db import Database
from app.overlay.drift import (
    Baseline,
    baseline,
    common_change_start,
    ewma_chart,
    run_rules,
    subgroup_sigma,
)
from app.overlay.model import TERM_NAMES
from app.schemas.analysis import (
    AnalysisFilter,
    DriftAlarm,
    DriftChart,
    DriftPoint,
    DriftReport,
    DriftSettings,
)
from app.services.analysis_data import Runs, as_utc, window_runs

DAY = 86400.0


@dataclass(frozen=True)
class _Subgroups:
    tool: np.ndarray
    side_b: np.ndarray
    lot: np.ndarray
    layer: np.ndarray
    count: np.ndarray
    seconds: np.ndarray
    mean: np.ndarray  # (g, 8)
    within_ss: np.ndarray  # (g, 8)


def _subgroups(runs: Runs, values: np.ndarray) -> _Subgroups:
    key = np.stack([runs.tool, runs.side_b.astype(np.int64), runs.lot, runs.layer], axis=1)
    unique, inverse = np.unique(key, axis=0, return_inverse=True)
    inverse = inverse.ravel()
    count = np.bincount(inverse).astype(np.float64)
    sums = np.stack([np.bincount(inverse, weights=values[:, j]) for j in range(8)], 1)
    mean = sums / count[:, None]
    within = np.stack([np.bincount(inverse, weights=(values[:, j] - mean[inverse, j]) ** 2)
                       for j in range(8)], 1)
    seconds = np.bincount(inverse, weights=runs.seconds) / count
    return _Subgroups(unique[:, 0], unique[:, 1].astype(bool), unique[:, 2], unique[:, 3],
                      np.asarray(count, dtype=np.int64), seconds, mean, within)


@dataclass
class _Series:
    """One chart and what its alarm needs once the tool's common change start is known."""

    tool: str
    side: str
    term: str
    centre: float
    make_chart: Callable[[], DriftChart]  # built only for charts that are shown
    days: np.ndarray
    means: np.ndarray
    sigmas: np.ndarray
    signal: int | None
    strength: float
    last: float  # the EWMA's distance from the centre at the last point, raw units
    rules: list[list[str]]


def _centre_and_spread(sg: _Subgroups, base_rows: np.ndarray, term: int) -> Baseline | None:
    """Centre: the median of the tools' baseline means, so that one tool already off during the
    baseline does not move it. Spread: lot-to-lot and panel-to-panel scatter about each tool's
    own baseline mean (``overlay.drift.baseline``)."""
    if base_rows.sum() < 2:
        return None
    tools = sg.tool[base_rows]
    counts = sg.count[base_rows]
    means = sg.mean[base_rows, term]
    n_tools = int(tools.max()) + 1
    weight = np.bincount(tools, weights=counts, minlength=n_tools)
    tool_mean = (np.bincount(tools, weights=counts * means, minlength=n_tools)
                 / np.maximum(weight, 1.0))
    centred = means - tool_mean[tools]
    spread = baseline(centred, counts, float(sg.within_ss[base_rows, term].sum()))
    if spread.between <= 0.0 and spread.within <= 0.0:
        return None
    centre = float(np.median(tool_mean[weight > 0]))
    return Baseline(centre, spread.between, spread.within, spread.subgroups)


def _chart(runs: Runs, sg: _Subgroups, rows: np.ndarray, term: int, settings: DriftSettings,
           base: Baseline) -> _Series:
    order = rows[np.argsort(sg.seconds[rows], kind="stable")]
    sigmas = subgroup_sigma(base, sg.count[order])
    z = (sg.mean[order, term] - base.target) / sigmas
    chart = ewma_chart(z, target=0.0, sigma=1.0, lam=settings.lam, k=settings.k)
    rules = run_rules(z)
    scale = float(subgroup_sigma(base, np.array([int(np.median(sg.count[order]))]))[0])
    tool, side = runs.tools[sg.tool[order[0]]], "B" if sg.side_b[order[0]] else "A"
    def make_chart() -> DriftChart:
        # Built without validation: every value is made here with its declared type, and a
        # whole-product chart has thousands of points.
        points = [
            DriftPoint.model_construct(
                lot=runs.lots[sg.lot[i]], layer=int(sg.layer[i]), panels=int(sg.count[i]),
                at=as_utc(float(sg.seconds[i])), mean_facing_side=float(sg.mean[i, term]),
                ewma=base.target + float(chart.ewma[n]) * scale,
                lower=base.target + float(chart.lower[n]) * scale,
                upper=base.target + float(chart.upper[n]) * scale, rules=rules[n])
            for n, i in enumerate(order)
        ]
        return DriftChart(exposure_tool=tool, side=side, term=TERM_NAMES[term],  # type: ignore[arg-type]
                          centre=base.target, sigma_between=base.between,
                          sigma_within=base.within, points=points)

    half = settings.k * np.sqrt(settings.lam / (2.0 - settings.lam))
    return _Series(tool, side, TERM_NAMES[term], base.target, make_chart,
                   sg.seconds[order] / DAY, sg.mean[order, term], sigmas, chart.first_signal,
                   float(np.max(np.abs(chart.ewma)) / half), float(chart.ewma[-1]) * scale,
                   rules)


def _alarms(group: list[_Series], settings: DriftSettings) -> list[DriftAlarm]:
    """Alarms of one tool and term family (translation, scale, rotation, trapezoid), both
    sides, with one change start shared by all of them."""
    first = min(float(s.days[0]) for s in group)
    last_signal = max(float(s.days[s.signal]) for s in group if s.signal is not None)
    span = max(last_signal - first, settings.baseline_days)
    changes = common_change_start(
        [(s.days, s.means, s.sigmas, s.centre) for s in group],
        earliest=first - span, latest=last_signal)
    out = []
    for s, change in zip(group, changes, strict=True):
        assert s.signal is not None
        fired = sorted({r for n in range(change.index, s.days.size) for r in s.rules[n]})
        out.append(DriftAlarm(
            exposure_tool=s.tool, side=s.side, term=s.term,  # type: ignore[arg-type]
            size_facing_side=s.last,
            strength=s.strength, first_signal=as_utc(float(s.days[s.signal]) * DAY),
            change_start=as_utc(change.start * DAY), change_kind=change.kind,
            change_rate=change.size, rules=fired,
        ))
    return out


def tool_drift(*, db: Database, filters: AnalysisFilter, settings: DriftSettings | None = None,
               all_charts: bool = False) -> DriftReport:
    """EWMA and run rules per tool, side and term; alarms strongest first."""
    settings = settings or DriftSettings()
    fleet_filter = filters.model_copy(update={"exposure_tool": None})
    with db.reading() as session:
        info, runs = window_runs(session, fleet_filter)
    if runs.size == 0:
        return DriftReport(product=info.code, settings=settings, baseline_end=None, alarms=[],
                           charts=[])
    sg = _subgroups(runs, runs.tool_frame(info.flip_axis))
    end = (settings.baseline_end.timestamp() if settings.baseline_end is not None
           else float(sg.seconds.min()) + settings.baseline_days * DAY)
    families: dict[tuple[int, int], list[_Series]] = {}
    charts: list[DriftChart] = []
    for side_b in (False, True):
        base_rows = (sg.side_b == side_b) & (sg.seconds < end)
        for term in range(8):
            base = _centre_and_spread(sg, base_rows, term)
            if base is None:
                continue
            for t, tool in enumerate(runs.tools):
                rows = np.flatnonzero((sg.tool == t) & (sg.side_b == side_b))
                if rows.size == 0 or filters.exposure_tool not in (None, tool):
                    continue
                series = _chart(runs, sg, rows, term, settings, base)
                if series.signal is not None:
                    families.setdefault((t, term // 2), []).append(series)
                if series.signal is not None or all_charts:
                    charts.append(series.make_chart())
    alarms = [a for group in families.values() for a in _alarms(group, settings)]
    alarms.sort(key=lambda a: a.strength, reverse=True)
    return DriftReport(product=info.code, settings=settings, baseline_end=as_utc(end),
                       alarms=alarms, charts=charts)
