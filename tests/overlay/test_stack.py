"""Stack accumulation: the mirror's consequence, direct evaluation, variance, planning figures."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal

from app.overlay.errors import OverlayInputError
from app.overlay.frames import mirror_terms
from app.overlay.model import evaluate
from app.overlay.stack import accumulate, default_check_points

POINTS = default_check_points(510.0, 515.0)
LAYERS = 12


def translation(tx: float, ty: float = 0.0, layers: int = LAYERS) -> np.ndarray:
    return np.tile([tx, ty, 0, 0, 0, 0, 0, 0.0], (layers, 1))


# Summation over the stack (common practice, docs/conventions.md "Accumulation"): a bias both sides'
# tools show the same way in their own frames adds up front to back once side B is mirrored;
# along the axis the flip keeps it cancels. 24 layers x 5 um = 120 um.
@pytest.mark.parametrize(
    "flip_axis, direction, expected",
    [
        ("y", (5.0, 0.0), (120.0, 0.0)),
        ("y", (0.0, 5.0), (0.0, 0.0)),
        ("x", (0.0, 5.0), (0.0, 120.0)),
        ("x", (5.0, 0.0), (0.0, 0.0)),
    ],
)
def test_same_bias_in_each_tool_frame(
    flip_axis: str, direction: tuple[float, float], expected: tuple[float, float]
) -> None:
    tool = translation(*direction)
    panel_b = mirror_terms(tool, side="B", flip_axis=flip_axis)
    result = accumulate(tool, panel_b, POINTS)
    assert_allclose(result.ftb_um, np.tile(expected, (len(POINTS), 1)), atol=1e-12)
    assert result.worst_um == pytest.approx(float(np.hypot(*expected)), abs=1e-12)
    assert_allclose(result.position_a_um, np.tile(np.multiply(direction, 12), (25, 1)))


@pytest.mark.parametrize("flip_axis", ["x", "y"])
def test_same_panel_direction_cancels(flip_axis: str) -> None:
    panel = translation(5.0, -3.0)
    result = accumulate(panel, panel, POINTS)
    assert_allclose(result.ftb_um, 0.0, atol=1e-12)
    assert result.worst_um == pytest.approx(0.0, abs=1e-12)
    # Each layer alone is still 5.8 um: every L2L check sees it.
    assert_allclose(result.l2l_worst_a_um, np.hypot(5.0, 3.0))
    # In tool frames, the same bias shows as opposite directions on the two sides.
    tool_b = mirror_terms(panel, side="B", flip_axis=flip_axis)
    assert not np.allclose(tool_b, panel)


def test_alternating_directions_cancel() -> None:
    signs = np.array([1.0, -1.0] * (LAYERS // 2))
    a = translation(5.0) * signs[:, np.newaxis]
    # Both tools show the same alternating pattern in their own frames (the adding case above).
    b = mirror_terms(translation(5.0) * signs[:, np.newaxis], side="B", flip_axis="y")
    result = accumulate(a, b, POINTS)
    assert_allclose(result.ftb_um, 0.0, atol=1e-12)
    assert_allclose(result.position_a_um, 0.0, atol=1e-12)
    # Part-way up the stack it does not cancel: after an odd pair 5 - (-5) = 10 um.
    assert_allclose(result.cumulative_worst_um[::2], 10.0)
    assert_allclose(result.cumulative_worst_um[1::2], 0.0, atol=1e-12)


def random_layers(rng: np.random.Generator, n: int) -> np.ndarray:
    scale = np.array([3.0, 3.0, 5e-3, 5e-3, 5e-3, 5e-3, 2e-5, 2e-5])
    return rng.normal(size=(n, 8)) * scale


@pytest.mark.parametrize("la, lb", [(12, 12), (12, 9), (3, 7)])
def test_ftb_equals_direct_evaluation(la: int, lb: int) -> None:
    rng = np.random.default_rng(la * 100 + lb)
    ta, tb, core = random_layers(rng, la), random_layers(rng, lb), random_layers(rng, 1)[0]
    result = accumulate(ta, tb, POINTS, core_terms=core)
    # Direct, one point and one layer at a time.
    for p, (x, y) in enumerate(POINTS):
        pos_a = sum(np.array(evaluate(t, np.array([x]), np.array([y])))[:, 0] for t in ta)
        pos_b = sum(np.array(evaluate(t, np.array([x]), np.array([y])))[:, 0] for t in tb)
        core_p = np.array(evaluate(core, np.array([x]), np.array([y])))[:, 0]
        assert_allclose(result.position_a_um[p], pos_a, rtol=1e-12, atol=1e-12)
        assert_allclose(result.position_b_um[p], pos_b, rtol=1e-12, atol=1e-12)
        assert_allclose(result.ftb_um[p], pos_a - pos_b + core_p, rtol=1e-12, atol=1e-12)
    lengths = np.hypot(result.ftb_um[:, 0], result.ftb_um[:, 1])
    assert_allclose(result.ftb_length_um, lengths)
    assert result.worst_index == int(np.argmax(lengths))
    assert result.worst_um == lengths.max()
    assert result.worst_at_mm == tuple(POINTS[result.worst_index])
    # Per-layer worst L2L and the planning figures.
    l2l_a = [np.hypot(*evaluate(t, POINTS[:, 0], POINTS[:, 1])).max() for t in ta]
    l2l_b = [np.hypot(*evaluate(t, POINTS[:, 0], POINTS[:, 1])).max() for t in tb]
    assert_allclose(result.l2l_worst_a_um, l2l_a)
    assert_allclose(result.l2l_worst_b_um, l2l_b)
    assert result.linear_worst_case_um == pytest.approx(sum(l2l_a) + sum(l2l_b))
    assert result.rss_um == pytest.approx(np.sqrt(np.sum(np.square(l2l_a + l2l_b))))
    assert result.rss_um <= result.linear_worst_case_um
    # Cumulative: layers 1..k of both sides, the shorter side contributing all it has.
    assert result.cumulative_worst_um.shape == (max(la, lb),)
    for k in range(1, max(la, lb) + 1):
        partial = accumulate(ta[:k], tb[:k], POINTS, core_terms=core)
        assert result.cumulative_worst_um[k - 1] == pytest.approx(partial.worst_um, rel=1e-12)
    assert result.cumulative_worst_um[-1] == pytest.approx(result.worst_um, rel=1e-12)


def test_residual_variance_adds() -> None:
    zeros = np.zeros((LAYERS, 8))
    var_a = np.tile([1.0, 4.0], (LAYERS, 1))
    var_b = np.tile([0.25, 1.0], (LAYERS, 1))
    result = accumulate(zeros, zeros, POINTS, residual_var_a=var_a, residual_var_b=var_b)
    # Variances add: 12 * 1 + 12 * 0.25 = 15 in x, 12 * 4 + 12 * 1 = 60 in y.
    assert_allclose(result.residual_sigma_um, (np.sqrt(15.0), np.sqrt(60.0)))
    # Adding the sigmas instead would give 12 * 1 + 12 * 0.5 = 18 in x: not what is reported.
    assert result.residual_sigma_um[0] < 18.0
    assert accumulate(zeros, zeros, POINTS).residual_sigma_um == (0.0, 0.0)


@pytest.mark.parametrize("la, lb", [(0, 5), (5, 0), (0, 0)])
def test_empty_side(la: int, lb: int) -> None:
    rng = np.random.default_rng(3)
    ta, tb = random_layers(rng, la), random_layers(rng, lb)
    result = accumulate(ta, tb, POINTS, residual_var_a=np.ones((la, 2)))
    direct = np.stack(evaluate(ta.sum(axis=0), *POINTS.T), -1) - np.stack(
        evaluate(tb.sum(axis=0), *POINTS.T), -1
    )
    assert_allclose(result.ftb_um, direct, atol=1e-12)
    assert result.l2l_worst_a_um.shape == (la,) and result.l2l_worst_b_um.shape == (lb,)
    assert result.cumulative_worst_um.shape == (max(la, lb),)
    assert result.residual_sigma_um == pytest.approx((np.sqrt(la), np.sqrt(la)))
    if la == lb == 0:
        assert result.worst_um == 0.0 and result.linear_worst_case_um == 0.0
        assert result.worst_index == 0


def test_result_arrays_are_read_only() -> None:
    result = accumulate(translation(1.0), translation(2.0), POINTS)
    with pytest.raises(ValueError):
        result.ftb_um[0, 0] = 0.0


def test_default_check_points() -> None:
    pts = default_check_points(510.0, 515.0)
    assert pts.shape == (25, 2)
    assert_allclose(pts.mean(axis=0), 0.0, atol=1e-12)
    assert_allclose(pts.min(axis=0), (-229.5, -231.75))  # 0.9 * 510 / 2, 0.9 * 515 / 2
    assert_allclose(pts.max(axis=0), (229.5, 231.75))
    assert_array_equal(default_check_points(100.0, 50.0, n=1), [[0.0, 0.0]])
    assert default_check_points(100.0, 50.0, n=3, fraction=1.0)[0].tolist() == [-50.0, -25.0]


@pytest.mark.parametrize(
    "kwargs, message",
    [
        ({"terms_a": np.zeros((2, 7))}, "terms_a must have shape"),
        ({"points_mm": np.zeros((0, 2))}, "at least one check point"),
        ({"terms_b": np.array([[np.nan] + [0.0] * 7])}, r"terms_b\[0, 0\] is not finite"),
        ({"residual_var_a": np.zeros((3, 2))}, "residual_var_a must have shape"),
        ({"residual_var_b": -np.ones((2, 2))}, "must be >= 0"),
        ({"core_terms": np.zeros(6)}, "core_terms must have shape"),
    ],
)
def test_bad_input(kwargs: dict[str, np.ndarray], message: str) -> None:
    args: dict[str, np.ndarray] = {
        "terms_a": np.zeros((2, 8)),
        "terms_b": np.zeros((2, 8)),
        "points_mm": POINTS,
    }
    args.update(kwargs)
    terms_a, terms_b, points = args.pop("terms_a"), args.pop("terms_b"), args.pop("points_mm")
    with pytest.raises(OverlayInputError, match=message):
        accumulate(terms_a, terms_b, points, **args)  # type: ignore[arg-type]
    with pytest.raises(OverlayInputError):
        default_check_points(0.0, 10.0)
    with pytest.raises(OverlayInputError):
        default_check_points(10.0, 10.0, fraction=1.5)
