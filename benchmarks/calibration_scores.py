"""Scores of a forecast against the simulated truth (numpy only; used by calibration.py and tests).

Inputs per panel: ``p[i, k-1]``, the stored P(exceed) after layer pair k; ``flagged[i, k-1]``,
whether the stored risk level was at_risk or over_limit then; ``fails[i]``, whether the true
final FTB exceeds the limit.

- Brier score BS = mean (p - y)^2 and skill 1 - BS / BS_ref against the base rate
  (BS_ref = ybar (1 - ybar)), as in Wilks, *Statistical Methods in the Atmospheric Sciences*,
  ch. 8 (Brier score and skill score against climatology).
- Reliability table: forecasts binned by p; per bin the count, mean p and observed frequency.
- Rates with their binomial standard error sqrt(r (1 - r) / n).
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass

import numpy as np

BINS = (0.0, 0.02, 0.05, 0.1, 0.2, 0.4, 0.7, 1.0000001)


@dataclass(frozen=True)
class Rate:
    value: float
    n: int

    @property
    def stderr(self) -> float:
        if self.n == 0:
            return float("nan")
        return float(np.sqrt(self.value * (1.0 - self.value) / self.n))

    def __str__(self) -> str:
        return f"{self.value:.3f} (se {self.stderr:.3f}, n {self.n})"


def rate(mask: np.ndarray) -> Rate:
    m = np.asarray(mask, dtype=bool)
    return Rate(float(m.mean()) if m.size else float("nan"), int(m.size))


@dataclass(frozen=True)
class LayerScore:
    layer: int
    n: int
    sum_p: float
    failures: int
    brier: float
    skill: float
    reliability: list[tuple[float, float, int, float, float]]  # lo, hi, n, mean p, observed

    @property
    def ratio(self) -> float:
        return self.sum_p / self.failures if self.failures else float("nan")


def layer_score(p: np.ndarray, fails: np.ndarray, layer: int) -> LayerScore:
    y = np.asarray(fails, dtype=np.float64)
    q = np.asarray(p, dtype=np.float64)
    brier = float(np.mean((q - y) ** 2))
    base = float(y.mean())
    ref = base * (1.0 - base)
    table = []
    for lo, hi in itertools.pairwise(BINS):
        sel = (q >= lo) & (q < hi)
        n = int(sel.sum())
        if n:
            table.append((lo, min(hi, 1.0), n, float(q[sel].mean()), float(y[sel].mean())))
    return LayerScore(layer=layer, n=int(y.size), sum_p=float(q.sum()), failures=int(y.sum()),
                      brier=brier, skill=1.0 - brier / ref if ref > 0 else float("nan"),
                      reliability=table)


@dataclass(frozen=True)
class PanelScores:
    false_alarm: Rate  # passing panels flagged at some state by layer ``by``
    miss: Rate  # failing panels never flagged by layer ``by``
    hit: Rate  # flagged panels (by layer ``by``) that really fail
    first_flag_median: float  # median layer of the first flag, failing panels flagged
    flapping: Rate  # panels that leave the flagged set at least twice (all layers)


def panel_scores(flagged: np.ndarray, fails: np.ndarray, *, by: int = 9) -> PanelScores:
    f = np.asarray(flagged, dtype=bool)
    y = np.asarray(fails, dtype=bool)
    early = f[:, :by].any(axis=1)
    first = np.argmax(f[:, :by], axis=1) + 1
    caught = early & y
    exits = (f[:, :-1] & ~f[:, 1:]).sum(axis=1)
    return PanelScores(
        false_alarm=rate(early[~y]),
        miss=rate(~early[y]),
        hit=rate(y[early]),
        first_flag_median=float(np.median(first[caught])) if caught.any() else float("nan"),
        flapping=rate(exits >= 2),
    )


def z_scores(truth: np.ndarray, mean: np.ndarray, sd: np.ndarray) -> np.ndarray:
    """(truth - mean) / sd, NaN where sd is 0."""
    sd = np.asarray(sd, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        out: np.ndarray = np.where(sd > 0, (np.asarray(truth) - np.asarray(mean)) / sd, np.nan)
    return out


THETAS = (0.1, 0.2, 0.3, 0.4, 0.5)


def print_sweep(p: np.ndarray, fails: np.ndarray, *, by: int = 9) -> None:
    """False alarm, miss and hit if a panel were flagged as soon as P reached theta (no
    hysteresis, no current-FTB rules): how the trade-off moves with the at-risk setting."""
    print(f"P-only flags by layer {by}:  theta  false alarm  miss   hit")
    for theta in THETAS:
        alt = panel_scores(np.nan_to_num(p) >= theta, fails, by=by)
        print(f"                          {theta:4.2f}  {alt.false_alarm.value:10.3f} "
              f"{alt.miss.value:6.3f} {alt.hit.value:5.3f}")
    for miss in (MISS_TARGET, NEW_PRODUCT_MISS_TARGET):
        theta, fa = lowest_false_alarm(p, fails, by=by, miss=miss)
        print(f"  lowest false alarm with miss <= {miss:.2f}, flag when P >= theta at any "
              f"layer: {fa:.3f} at theta {theta:.3f}")
        theta, fa = lowest_false_alarm(p, fails, by=by, miss=miss, last_only=True)
        print(f"  lowest false alarm with miss <= {miss:.2f}, flag on P after layer {by} "
              f"alone (the best rule for these counts): {fa:.3f} at theta {theta:.3f}")


#: The issue's miss targets: with history, and for a new product.
MISS_TARGET = 0.05
NEW_PRODUCT_MISS_TARGET = 0.10


def lowest_false_alarm(p: np.ndarray, fails: np.ndarray, *, by: int = 9,
                       miss: float = MISS_TARGET, last_only: bool = False) -> tuple[float, float]:
    """(theta, false alarm): the P-only threshold with the lowest false alarm by layer ``by``
    among those that miss at most ``miss`` of the failing panels.

    A panel is flagged by layer ``by`` when its highest P over layers 1..by reaches theta (the
    service's rule), or with ``last_only`` when its P after layer ``by`` does. The latter is the
    best any rule can do for "flagged by layer ``by``" with a forecast that is the exact
    posterior: waiting costs nothing in these counts, and the posterior after layer ``by`` holds
    all that is known then (Neyman-Pearson: the likelihood ratio is monotone in the posterior).
    The best theta is the highest that still leaves at most floor(miss n_fail) failing panels
    below it: the (floor(miss n_fail) + 1)-th smallest of the failing panels' figures.
    """
    q = np.nan_to_num(np.asarray(p, dtype=np.float64))
    top = q[:, by - 1] if last_only else q[:, :by].max(axis=1)
    y = np.asarray(fails, dtype=bool)
    if not y.any() or y.all():
        return float("nan"), float("nan")
    allowed = int(np.floor(miss * y.sum()))
    theta = float(np.sort(top[y])[allowed])
    return theta, float(np.mean(top[~y] >= theta))


def print_watch(listed: np.ndarray, fails: np.ndarray, *, by: int = 9) -> None:
    """The early warning: panels on the watch list or worse (any level but clear) by layer
    ``by``; how many failing panels it never showed, how many passing ones it did."""
    ps = panel_scores(listed, fails, by=by)
    print(f"watch or worse by layer {by}: failing never listed {ps.miss}, passing listed "
          f"{ps.false_alarm}, median first layer (failing) {ps.first_flag_median:.1f}")
