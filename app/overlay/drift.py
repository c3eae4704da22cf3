"""Drift of an exposure tool: EWMA chart, Western Electric run rules and the start of a change.

A chart follows one term of one tool and side over time, in the tool's own frame, one point per
subgroup (the panels of one lot that ran one layer on that tool). The formulas are those of the
NIST/SEMATECH e-Handbook of Statistical Methods, section 6.3.2.4 (EWMA control charts) and
section 6.3.2 (the Western Electric rules):

    z_0 = target,  z_i = lambda * x_i + (1 - lambda) * z_{i-1}
    limits = target +/- k * s * sqrt(lambda / (2 - lambda))       (the handbook's example)
    or, exactly at point i, with the factor [1 - (1 - lambda)^(2i)] under the root.

Subgroups are of unequal size, so the service standardises each subgroup mean before charting
(x_i = (mean_i - target) / sd_i, sd_i = sqrt(between^2 + within^2 / n_i)); the chart then runs
with target 0 and s 1. ``baseline`` estimates target, between and within from the subgroups of a
baseline window by the one-way random-effects method of moments.

The start of a change is estimated by least squares over the subgroup means, as a step or as a
ramp that leaves the baseline level at time tau (a broken line), whichever fits better: the
maximum-likelihood estimate of the change time for normal errors with known variances.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Final, Literal

import numpy as np
from numpy.typing import NDArray

from app.overlay.errors import OverlayInputError
from app.overlay.fit import _as_vector as _finite
from app.overlay.model import FloatArray

BoolArray = NDArray[np.bool_]

#: Western Electric rules (NIST/SEMATECH e-Handbook 6.3.2): (name, window, hits, beyond sigma).
RUN_RULES: Final = (
    ("1 beyond 3 sigma", 1, 1, 3.0),
    ("2 of 3 beyond 2 sigma", 3, 2, 2.0),
    ("4 of 5 beyond 1 sigma", 5, 4, 1.0),
    ("8 in a row on one side", 8, 8, 0.0),
)


@dataclass(frozen=True)
class EwmaChart:
    """EWMA statistic and its limits, one entry per point."""

    ewma: FloatArray
    lower: FloatArray
    upper: FloatArray
    signal: BoolArray  # the EWMA is beyond a limit at that point

    @property
    def first_signal(self) -> int | None:
        hits = np.flatnonzero(self.signal)
        return int(hits[0]) if hits.size else None


def ewma_chart(
    values: FloatArray, *, target: float, sigma: float, lam: float = 0.2, k: float = 3.0,
    exact_limits: bool = False,
) -> EwmaChart:
    """EWMA chart of ``values`` (NIST/SEMATECH e-Handbook 6.3.2.4).

    ``exact_limits`` uses the limits of each point, narrower at the start; the default is the
    steady-state limits of the handbook's worked example.
    """
    x = _finite("values", values)
    if not 0.0 < lam <= 1.0:
        raise OverlayInputError(f"lambda must be in (0, 1], got {lam}")
    if not (sigma > 0.0 and np.isfinite(sigma)):
        raise OverlayInputError(f"sigma must be positive, got {sigma}")
    if k <= 0.0:
        raise OverlayInputError(f"k must be positive, got {k}")
    z = np.empty_like(x)
    previous = target
    for i, value in enumerate(x):
        previous = lam * value + (1.0 - lam) * previous
        z[i] = previous
    factor = np.full_like(x, lam / (2.0 - lam))
    if exact_limits:
        factor *= 1.0 - (1.0 - lam) ** (2.0 * np.arange(1, x.size + 1))
    half = k * sigma * np.sqrt(factor)
    lower, upper = target - half, target + half
    return EwmaChart(z, lower, upper, (z > upper) | (z < lower))


def run_rules(standardized: FloatArray) -> list[list[str]]:
    """Western Electric rules over standardised points ((x - centre) / sigma).

    Returns, for every point, the names of the rules that fire at it (the point completes the
    pattern). A pattern counts only with its hits on one side of the centre line.
    """
    z = _finite("standardized", standardized)
    fired: list[list[str]] = [[] for _ in range(z.size)]
    for name, window, hits, beyond in RUN_RULES:
        for sign in (1.0, -1.0):
            outside = (sign * z > beyond).astype(np.int64)
            counts = np.convolve(outside, np.ones(window, dtype=np.int64))[: z.size]
            for i in np.flatnonzero((counts >= hits) & (sign * z > beyond)):
                fired[int(i)].append(name)
    return fired


@dataclass(frozen=True)
class Baseline:
    """Centre and spread of subgroup means from a baseline window."""

    target: float
    between: float  # sd of the subgroup effect (lot to lot)
    within: float  # sd of one panel about its subgroup mean
    subgroups: int


def baseline(means: FloatArray, counts: NDArray[np.int64], pooled_ss: float) -> Baseline:
    """One-way random-effects estimate over baseline subgroups (method of moments).

    ``pooled_ss`` is the within-subgroup sum of squares, sum_i sum_j (x_ij - mean_i)^2. The
    between variance is (MS_between - MS_within) / n0 with n0 = (N - sum n_i^2 / N) / (g - 1),
    the unbalanced one-way formula (e.g. Searle, Casella and McCulloch, Variance Components,
    ch. 3, from memory), truncated at zero.
    """
    m = _finite("means", means)
    n = np.asarray(counts, dtype=np.float64)
    if m.size < 2 or n.shape != m.shape or np.any(n < 1):
        raise OverlayInputError("a baseline needs at least two subgroups with a count each")
    total = n.sum()
    target = float(np.sum(n * m) / total)
    df_within = total - m.size
    ms_within = pooled_ss / df_within if df_within > 0 else 0.0
    ms_between = float(np.sum(n * (m - target) ** 2)) / (m.size - 1)
    n0 = (total - np.sum(n**2) / total) / (m.size - 1)
    between2 = max((ms_between - ms_within) / n0, 0.0)
    if df_within <= 0:  # single panels only: the between-subgroup spread is all there is
        between2, ms_within = ms_between, 0.0
    return Baseline(target, float(np.sqrt(between2)), float(np.sqrt(ms_within)), int(m.size))


def subgroup_sigma(base: Baseline, counts: NDArray[np.int64]) -> FloatArray:
    """Standard deviation of a subgroup mean of ``counts`` panels under the baseline."""
    n = np.asarray(counts, dtype=np.float64)
    return np.sqrt(base.between**2 + base.within**2 / n)


_KINDS: Final[tuple[Literal["step", "ramp"], ...]] = ("step", "ramp")


@dataclass(frozen=True)
class ChangeEstimate:
    """Where a change most likely began: ``start`` on the time axis of the input."""

    kind: Literal["step", "ramp"]
    start: float
    size: float  # the step, or the ramp's slope per unit of time
    index: int  # first point at or after the start


def _profile(
    t: FloatArray, x: FloatArray, s: FloatArray, candidates: FloatArray, kind: str
) -> tuple[FloatArray, list[ChangeEstimate]]:
    """Weighted squared error of a step or a ramp model at each candidate start (all candidates
    at once: one regressor row per candidate)."""
    w = 1.0 / s**2
    tau = candidates[:, np.newaxis]
    if kind == "step":
        # A step before the first point cannot be dated: it is the first point.
        regressor = ((t >= tau) & (tau >= t[0])).astype(np.float64)
    else:
        regressor = np.maximum(t - tau, 0.0)
    weight = (w * regressor**2).sum(axis=1)
    cross = (w * regressor * x).sum(axis=1)
    usable = weight > 0
    size = np.where(usable, cross / np.where(usable, weight, 1.0), 0.0)
    # Least squares: sum w (x - size r)^2 = sum w x^2 - size^2 * sum w r^2.
    sse = np.where(usable, float(np.sum(w * x**2)) - size**2 * weight, np.inf)
    index = np.searchsorted(t, candidates, side="left")
    label: Literal["step", "ramp"] = "step" if kind == "step" else "ramp"
    fits = [ChangeEstimate(label, float(c), float(d), int(i))
            for c, d, i in zip(candidates, size, index, strict=True)]
    return sse, fits


def _series(times: FloatArray, values: FloatArray, sigmas: FloatArray, level: float
            ) -> tuple[FloatArray, FloatArray, FloatArray]:
    t = _finite("times", times)
    x = _finite("values", values) - level
    s = _finite("sigmas", sigmas)
    if not (t.size == x.size == s.size) or t.size < 2 or np.any(s <= 0):
        raise OverlayInputError("change_start needs >= 2 points with positive sigmas")
    if np.any(np.diff(t) < 0):
        raise OverlayInputError("times must be in ascending order")
    return t, x, s


def change_start(
    times: FloatArray, values: FloatArray, sigmas: FloatArray, *, level: float,
    earliest: float, latest: float, grid: int = 400,
) -> ChangeEstimate:
    """Least-squares change point of a step or a ramp away from ``level``.

    Models, for each candidate start tau in [earliest, latest]:
    step  x_i = level + d * [t_i >= tau];   ramp  x_i = level + b * max(t_i - tau, 0).
    Weighted by 1 / sigma_i^2; the model and tau with the least weighted squared error win. A
    ramp may start before the first point (it is extrapolated back to ``level``), which is how
    a slow drift that began before the data is dated. ``times`` ascending.
    """
    return common_change_start([(times, values, sigmas, level)], earliest=earliest,
                               latest=latest, grid=grid)[0]


def common_change_start(
    series: list[tuple[FloatArray, FloatArray, FloatArray, float]], *, earliest: float,
    latest: float, grid: int = 400,
) -> list[ChangeEstimate]:
    """One start and one kind of change (step or ramp) shared by several series (the terms and
    sides of one tool): the pair that minimises the summed squared error; sizes are per series."""
    if not earliest <= latest:
        raise OverlayInputError("earliest must not be after latest")
    if not series:
        raise OverlayInputError("common_change_start needs at least one series")
    checked = [_series(*item) for item in series]
    candidates = np.linspace(earliest, latest, grid)
    best: tuple[float, list[ChangeEstimate]] | None = None
    for kind in _KINDS:
        profiles = [_profile(t, x, s, candidates, kind) for t, x, s in checked]
        total = np.sum([p[0] for p in profiles], axis=0)
        if not np.any(np.isfinite(total)):
            continue
        n = int(np.argmin(total))
        if best is None or total[n] < best[0] - 1e-12:
            best = (float(total[n]), [fits[n] for _, fits in profiles])
    if best is None:
        raise OverlayInputError("no candidate start has points after it")
    return best[1]
