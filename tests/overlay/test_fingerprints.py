"""Tool fingerprints and FTB attribution on a seeded fleet with known tool biases."""

from __future__ import annotations

import numpy as np
import pytest

from app.overlay.attribution import contributions, panel_ftb_terms, spread
from app.overlay.fingerprints import fingerprints
from app.overlay.frames import mirror_terms
from app.overlay.model import evaluate

TOOLS = ("T1", "T2", "T3")
LAYERS = 6
# Known biases in each tool's own frame: T2 on side B of a flip-x product (Ty and Ox), T3 on
# side A of a flip-y product (Tx).
BIAS = {("x", "T2", "B"): np.array([0, 1.5, 0, 0, 0.004, 0, 0, 0]),
        ("y", "T3", "A"): np.array([-1.2, 0, 0, 0, 0, 0, 0, 0])}


def _fleet(flip: str, seed: int, panels: int = 120):
    """Layer runs of a product: panel-frame terms, side, tool and panel codes."""
    rng = np.random.default_rng(seed)
    rows = []
    for p in range(panels):
        for side in ("A", "B"):
            for _ in range(LAYERS):
                tool = int(rng.integers(0, 3))
                own = rng.normal(0, [2.0, 2.0, 0.003, 0.003, 0.003, 0.003, 0, 0])
                own = own + BIAS.get((flip, TOOLS[tool], side), np.zeros(8))
                rows.append((mirror_terms(own, side=side, flip_axis=flip), side, tool, p))
    terms = np.array([r[0] for r in rows])
    side = np.array([r[1] for r in rows])
    tool = np.array([r[2] for r in rows], dtype=np.int64)
    panel = np.array([r[3] for r in rows], dtype=np.int64)
    return terms, side, tool, panel


@pytest.mark.parametrize(("flip", "tool", "side"), [("x", "T2", "B"), ("y", "T3", "A")])
def test_known_bias_recovered_in_the_tool_frame(flip: str, tool: str, side: str) -> None:
    terms, sides, tools, _ = _fleet(flip, seed=21)
    # The service's job: mirror side B back into each tool's own frame before averaging.
    own = terms.copy()
    b = sides == "B"
    own[b] = mirror_terms(terms[b], side="B", flip_axis=flip)
    cell = b.astype(np.int64)  # 0 = side A, 1 = side B
    fp = fingerprints(own, tools, cell, n_tools=3, n_cells=2)
    t, c = TOOLS.index(tool), int(side == "B")
    bias = BIAS[flip, tool, side]
    # Seeded scenario with a known bias: the truth lies inside the 95 % interval of the
    # difference to the rest of the fleet, for every term (biased or not).
    lo = fp.difference[t, c] - fp.difference_half_width[t, c]
    hi = fp.difference[t, c] + fp.difference_half_width[t, c]
    assert np.all((lo[:6] <= bias[:6]) & (bias[:6] <= hi[:6]))
    biased = np.flatnonzero(bias)
    assert np.all(np.sign(fp.mean[t, c, biased]) == np.sign(bias[biased]))
    assert np.all(np.abs(fp.difference[t, c, biased]) > fp.difference_half_width[t, c, biased])
    # Panel frame: on side B of the flip-x product Ty and Ox change sign (frames.py); on side A
    # the frames coincide.
    panel_mean = terms[(tools == t) & (cell == c)].mean(axis=0)
    expected_sign = np.sign(mirror_terms(bias, side=side, flip_axis=flip))
    assert np.all(np.sign(panel_mean[biased]) == expected_sign[biased])
    # The other tools' own means hold zero (their difference to the rest carries the biased
    # tool's share of that rest, so it is the mean that is judged).
    for other in set(range(3)) - {t}:
        assert np.all(np.abs(fp.mean[other, c, biased]) <= fp.half_width[other, c, biased])


def test_interval_matches_scipy_t_interval() -> None:
    stats = pytest.importorskip("scipy.stats")
    rng = np.random.default_rng(4)
    terms = rng.normal(0, 1, (9, 8))
    fp = fingerprints(terms, np.zeros(9, dtype=np.int64), np.zeros(9, dtype=np.int64),
                      n_tools=1, n_cells=1)
    # Outside check: scipy.stats.t.interval on the same sample.
    lo, hi = stats.t.interval(0.95, 8, loc=terms[:, 0].mean(), scale=stats.sem(terms[:, 0]))
    assert fp.half_width[0, 0, 0] == pytest.approx((hi - lo) / 2, rel=1e-12)
    assert np.isnan(fp.difference_half_width[0, 0, 0])  # no rest of the fleet to compare


def test_contributions_add_up_to_the_mean_ftb_and_the_what_if_removes_the_bias() -> None:
    terms, sides, tools, panel = _fleet("y", seed=8)
    sign = np.where(sides == "A", 1.0, -1.0)
    ftb = panel_ftb_terms(terms, sign, panel, 120)
    x, y = np.array([-200.0, 0.0, 200.0]), np.array([-200.0, 0.0, 200.0])
    with_bias = spread(ftb, x, y)
    dx, _ = evaluate(ftb, x, y)
    assert with_bias.mean_dx == pytest.approx(dx.mean(axis=0))
    px, py = float(x[with_bias.worst]), float(y[with_bias.worst])
    by_tool = contributions(terms, sign, tools, 3, 120, px, py)
    assert by_tool.dx.sum() == pytest.approx(with_bias.mean_dx[with_bias.worst])
    assert by_tool.share.sum() == pytest.approx(1.0)
    assert int(np.argmax(by_tool.share)) == TOOLS.index("T3")
    # What-if: remove T3's bias from its side-A runs; the mean FTB falls by 6 layers * 1/3 of
    # the runs * 1.2 um = 2.4 um in x (expected value; tolerance for the tool draw).
    fixed = terms.copy()
    on_t3 = (tools == 2) & (sides == "A")
    fixed[on_t3] -= BIAS["y", "T3", "A"]
    without = spread(panel_ftb_terms(fixed, sign, panel, 120), x, y)
    shift = with_bias.mean_dx - without.mean_dx
    np.testing.assert_allclose(shift, -on_t3.sum() / 120 * 1.2, rtol=1e-9)
    assert abs(shift[0] + 2.4) < 0.3
