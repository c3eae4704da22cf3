"""Overlay model fit: references, worked example, degenerate layouts, batched == single."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose
from skimage.transform import AffineTransform

from app.overlay import _guard, _lsq
from app.overlay.errors import OverlayInputError
from app.overlay.fit import OverlayFit, fit_many, fit_measurement, reach_of
from app.overlay.model import design_matrix, evaluate
from app.overlay.stack import default_check_points

TERMS = np.array([1.5, -2.0, 3e-3, -2e-3, 1.2e-3, 0.8e-3, 4e-6, -3e-6])


def grid(nx: int = 7, ny: int = 7, half_w: float = 240.0, half_h: float = 245.0) -> np.ndarray:
    gx, gy = np.meshgrid(np.linspace(-half_w, half_w, nx), np.linspace(-half_h, half_h, ny))
    return np.stack([gx.ravel(), gy.ravel()], axis=-1)


def displaced(
    terms: np.ndarray, pts: np.ndarray, noise: float = 0.0, seed: int = 0
) -> tuple[np.ndarray, np.ndarray]:
    dx, dy = evaluate(terms, pts[:, 0], pts[:, 1])
    rng = np.random.default_rng(seed)
    return dx + rng.normal(0.0, noise, dx.shape), dy + rng.normal(0.0, noise, dy.shape)


def lstsq_terms(pts: np.ndarray, dx: np.ndarray, dy: np.ndarray, n_terms: int) -> np.ndarray:
    """Reference fit: numpy.linalg.lstsq on model.design_matrix, uncentred."""
    a = design_matrix(pts[:, 0], pts[:, 1])[:, :n_terms]
    sol, *_ = np.linalg.lstsq(a, np.concatenate([dx, dy]), rcond=None)
    return np.concatenate([sol, np.zeros(8 - n_terms)])


def assert_same_fit(
    a: OverlayFit,
    b: OverlayFit,
    reach: float = 1.0,
    rtol: float = 1e-9,
    residual_atol: float | None = None,
) -> None:
    """Equal to ``rtol``: terms compared by their contribution at distance ``reach`` (mm).

    Residual statistics to ``residual_atol``, by default 1e-9 of the largest residual.
    """
    assert (a.model, a.requested, a.note, a.fitted, a.n_sites) == (
        b.model,
        b.requested,
        b.note,
        b.fitted,
        b.n_sites,
    )
    r = max(1.0, reach)
    scale = np.array([1, 1, r, r, r, r, r * r, r * r])
    size = max(1.0, float(np.abs(b.terms * scale).max()))
    assert_allclose(a.terms * scale, b.terms * scale, rtol=0, atol=rtol * size)
    atol = 1e-9 * max(1.0, b.max_residual_um) if residual_atol is None else residual_atol
    for name in ("mean_um", "sigma_um", "m3s_um"):
        assert_allclose(getattr(a, name), getattr(b, name), rtol=1e-9, atol=atol)
    assert_allclose(a.max_residual_um, b.max_residual_um, rtol=1e-9, atol=atol)


def assert_same_worst_site(
    a: OverlayFit, b: OverlayFit, x: np.ndarray, y: np.ndarray, dx: np.ndarray, dy: np.ndarray
) -> None:
    """Same site of the largest residual, unless several sites tie for it (then any of them)."""
    rx, ry = dx - evaluate(b.terms, x, y)[0], dy - evaluate(b.terms, x, y)[1]
    length = np.hypot(rx, ry)
    tied = np.flatnonzero(length >= length.max() - 1e-9 * max(1.0, float(np.abs(dx).max())))
    assert a.max_residual_at_mm in {(x[i], y[i]) for i in tied}
    assert b.max_residual_at_mm in {(x[i], y[i]) for i in tied}
    if tied.size == 1:
        assert a.max_residual_at_mm == b.max_residual_at_mm


def assert_no_nan(f: OverlayFit) -> None:
    values = [v for v in f.to_dict().values() if isinstance(v, float)]
    assert np.all(np.isfinite(f.terms)) and np.all(np.isfinite(values))


# ------------------------------------------------------------------------------ references


@pytest.mark.parametrize("trapezoid", [False, True])
def test_exact_recovery_without_noise(trapezoid: bool) -> None:
    pts = grid()
    truth = TERMS if trapezoid else np.concatenate([TERMS[:6], [0.0, 0.0]])
    dx, dy = displaced(truth, pts)
    fit = fit_measurement(pts[:, 0], pts[:, 1], dx, dy, trapezoid=trapezoid)
    # reference: numpy.linalg.lstsq on the same design
    ref = lstsq_terms(pts, dx, dy, 8 if trapezoid else 6)
    assert_allclose(fit.terms, truth, rtol=1e-9, atol=1e-12)
    assert_allclose(fit.terms, ref, rtol=1e-9, atol=1e-12)
    assert fit.model == ("trapezoid" if trapezoid else "linear")
    assert fit.note is None
    assert fit.sigma_um[0] < 1e-9 and fit.sigma_um[1] < 1e-9


@pytest.mark.parametrize("trapezoid", [False, True])
@pytest.mark.parametrize("seed", [1, 2, 3])
def test_agrees_with_lstsq_under_noise(trapezoid: bool, seed: int) -> None:
    rng = np.random.default_rng(seed)
    pts = rng.uniform(-250.0, 250.0, size=(30, 2))
    dx, dy = displaced(TERMS, pts, noise=0.8, seed=seed)
    fit = fit_measurement(pts[:, 0], pts[:, 1], dx, dy, trapezoid=trapezoid)
    p = 8 if trapezoid else 6
    # reference: numpy.linalg.lstsq on the same design
    ref = lstsq_terms(pts, dx, dy, p)
    assert_allclose(fit.terms, ref, rtol=1e-9, atol=1e-12)
    # Residual statistics from the reference solution, n - p/2 degrees of freedom per axis.
    rdx, rdy = dx - evaluate(ref, pts[:, 0], pts[:, 1])[0], dy - evaluate(ref, *pts.T)[1]
    dof = len(pts) - p // 2
    sigma = (np.sqrt(np.sum(rdx**2) / dof), np.sqrt(np.sum(rdy**2) / dof))
    assert_allclose(fit.sigma_um, sigma, rtol=1e-9)
    assert_allclose(fit.mean_um, (rdx.mean(), rdy.mean()), atol=1e-9)
    assert_allclose(fit.m3s_um, np.abs(fit.mean_um) + 3 * np.array(sigma), rtol=1e-9)
    k = int(np.argmax(np.hypot(rdx, rdy)))
    assert_allclose(fit.max_residual_um, np.hypot(rdx[k], rdy[k]), rtol=1e-9)
    assert fit.max_residual_at_mm == (pts[k, 0], pts[k, 1])


@pytest.mark.parametrize("noise", [0.0, 0.5])
@pytest.mark.parametrize("seed", [4, 5])
def test_agrees_with_skimage_affine(seed: int, noise: float) -> None:
    rng = np.random.default_rng(seed)
    pts = rng.uniform(-250.0, 250.0, size=(25, 2))
    linear = np.concatenate([TERMS[:6], [0.0, 0.0]])
    dx, dy = displaced(linear, pts, noise=noise, seed=seed)
    fit = fit_measurement(pts[:, 0], pts[:, 1], dx, dy)
    # reference: skimage.transform.AffineTransform.from_estimate (scikit-image 0.26)
    dst = pts + np.stack([dx, dy], axis=-1) / 1000.0  # um -> mm
    tform = AffineTransform.from_estimate(pts, dst)
    assert tform
    tx, ty, sx, sy, ox, oy = fit.terms[:6]
    # dst = src + d/1000: A = I + [[Sx, -Ox], [Oy, Sy]] / 1000, offset = (Tx, Ty) / 1000 mm.
    expected = np.array(
        [[1 + sx / 1000, -ox / 1000, tx / 1000], [oy / 1000, 1 + sy / 1000, ty / 1000]]
    )
    # skimage solves total least squares on normalised points, which equals OLS for exact data
    # and differs at second order in the noise: 1e-8 here is 0.01 ppm, against a standard error
    # of about 1 ppm for this layout and noise.
    assert_allclose(tform.params[:2], expected, rtol=0, atol=1e-13 if noise == 0 else 1e-8)


def test_one_ppm_worked_example() -> None:
    # Plain arithmetic: 75 mm * 1e-6 = 0.075 um, 70 mm * 1e-6 = 0.070 um.
    x = np.array([-75.0, 75.0, 75.0, -75.0])
    y = np.array([-70.0, -70.0, 70.0, 70.0])
    fit = fit_measurement(x, y, np.sign(x) * 0.075, np.sign(y) * 0.070)
    assert_allclose(fit.scale_ppm, (1.0, 1.0), rtol=1e-12)
    assert_allclose(fit.terms[[0, 1, 4, 5]], 0.0, atol=1e-15)
    assert fit.rotation_urad == pytest.approx(0.0, abs=1e-12)


def test_reported_units() -> None:
    pts = grid()
    dx, dy = displaced(TERMS, pts)
    fit = fit_measurement(pts[:, 0], pts[:, 1], dx, dy, trapezoid=True)
    # 1 um/mm = 1000 ppm = 1000 urad (conventions.md); rotation (Ox+Oy)/2, non-orthogonality Oy-Ox.
    assert_allclose(fit.scale_ppm, (3.0, -2.0), rtol=1e-9)
    assert_allclose(fit.orientation_urad, (1.2, 0.8), rtol=1e-9)
    assert fit.rotation_urad == pytest.approx(1.0, rel=1e-9)
    assert fit.nonorthogonality_urad == pytest.approx(-0.4, rel=1e-9)
    assert_allclose(fit.trapezoid, (4e-6, -3e-6), rtol=1e-9)
    d = fit.to_dict()
    assert d["sx_ppm"] == pytest.approx(3.0) and d["ky_um_per_mm2"] == pytest.approx(-3e-6)
    assert all(type(v) in (float, int, str, list, type(None)) for v in d.values())
    assert isinstance(d["max_residual_at_mm"], list) and len(d["max_residual_at_mm"]) == 2


# ------------------------------------------------------------------------------ degenerate


def test_one_site_is_translation_with_zero_sigma() -> None:
    fit = fit_measurement(np.array([10.0]), np.array([20.0]), np.array([1.5]), np.array([-2.5]))
    assert fit.model == "translation" and fit.fitted == ("Tx", "Ty")
    assert_allclose(fit.terms, [1.5, -2.5, 0, 0, 0, 0, 0, 0], atol=1e-15)
    assert fit.sigma_um == (0.0, 0.0)
    assert fit.note is not None and "6 terms need at least 3 sites" in fit.note
    assert "no residual degrees of freedom" in fit.note
    assert_no_nan(fit)


def test_two_sites_fall_back_to_translation() -> None:
    fit = fit_measurement(
        np.array([-100.0, 100.0]), np.array([0.0, 50.0]), np.array([1.0, 3.0]), np.array([2.0, 2.0])
    )
    assert fit.model == "translation"
    assert_allclose(fit.terms[:2], [2.0, 2.0])
    assert np.all(fit.terms[2:] == 0.0)
    # reference: sample standard deviation, numpy.std(ddof=1), n - p = 2 - 1.
    assert_allclose(fit.sigma_um, (np.std([1.0, 3.0], ddof=1), 0.0), atol=1e-15)
    assert fit.note is not None and "no residual degrees" not in fit.note


@pytest.mark.parametrize(
    "x, y",
    [
        (np.linspace(-200, 200, 9), 0.5 * np.linspace(-200, 200, 9) + 3.0),  # slanted line
        (np.full(9, 42.0), np.linspace(-200, 200, 9)),  # vertical line
        (np.linspace(-200, 200, 9), np.full(9, -7.0)),  # horizontal line
        (np.full(9, 5.0), np.full(9, 5.0)),  # all sites on one point
    ],
    ids=["slanted", "vertical", "horizontal", "coincident"],
)
@pytest.mark.parametrize("trapezoid", [False, True])
def test_collinear_sites_fall_back_to_translation(
    x: np.ndarray, y: np.ndarray, trapezoid: bool
) -> None:
    rng = np.random.default_rng(7)
    dx, dy = rng.normal(3.0, 0.5, x.size), rng.normal(-1.0, 0.5, x.size)
    fit = fit_measurement(x, y, dx, dy, trapezoid=trapezoid)
    assert fit.model == "translation"
    assert fit.note is not None and "collinear" in fit.note
    assert_allclose(fit.terms[:2], [dx.mean(), dy.mean()], rtol=1e-12)
    assert np.all(fit.terms[2:] == 0.0)
    # reference: numpy.std(ddof=1) for the translation-only residual
    assert_allclose(fit.sigma_um, (np.std(dx, ddof=1), np.std(dy, ddof=1)), rtol=1e-12)
    assert_no_nan(fit)


def test_cross_layout_cannot_fit_trapezoid() -> None:
    # Sites only on the two axes: x*y = 0 everywhere, so Kx, Ky are not determined.
    t = np.linspace(-200, 200, 9)
    x = np.concatenate([t, np.zeros(9)])
    y = np.concatenate([np.zeros(9), t])
    dx, dy = displaced(np.concatenate([TERMS[:6], [0, 0]]), np.stack([x, y], axis=-1))
    fit = fit_measurement(x, y, dx, dy, trapezoid=True)
    assert fit.model == "linear" and fit.requested == "trapezoid"
    assert fit.note is not None and "x*y" in fit.note
    assert_allclose(fit.terms[:6], TERMS[:6], rtol=1e-9, atol=1e-12)
    assert np.all(fit.terms[6:] == 0.0)


def test_three_sites_linear_exactly_determined() -> None:
    pts = np.array([[-100.0, -50.0], [120.0, -40.0], [0.0, 150.0]])
    dx, dy = displaced(np.concatenate([TERMS[:6], [0, 0]]), pts)
    fit = fit_measurement(pts[:, 0], pts[:, 1], dx, dy, trapezoid=True)
    assert fit.model == "linear"
    assert_allclose(fit.terms[:6], TERMS[:6], rtol=1e-9, atol=1e-12)
    assert fit.sigma_um == (0.0, 0.0)
    assert fit.note is not None
    assert "8 terms need at least 4 sites" in fit.note and "no residual degrees" in fit.note


def test_all_zero_vectors() -> None:
    pts = grid()
    zeros = np.zeros(len(pts))
    fit = fit_measurement(pts[:, 0], pts[:, 1], zeros, zeros, trapezoid=True)
    assert np.all(fit.terms == 0.0)
    assert fit.sigma_um == (0.0, 0.0) and fit.max_residual_um == 0.0
    assert fit.note is None
    assert_no_nan(fit)


@pytest.mark.parametrize("trapezoid", [False, True])
def test_huge_coordinates(trapezoid: bool) -> None:
    # Sites 1e6 mm from the origin; terms are still reported about the origin.
    offset = 1e6
    pts = grid() + offset
    truth = TERMS if trapezoid else np.concatenate([TERMS[:6], [0, 0]])
    dx, dy = displaced(truth, pts)
    fit = fit_measurement(pts[:, 0], pts[:, 1], dx, dy, trapezoid=trapezoid)
    assert fit.model == ("trapezoid" if trapezoid else "linear") and fit.note is None
    size = float(np.abs(np.concatenate([dx, dy])).max())
    got = np.stack(evaluate(fit.terms, pts[:, 0], pts[:, 1]))
    assert_allclose(got, np.stack([dx, dy]), rtol=0, atol=1e-11 * size)
    if trapezoid:
        # At 1e6 mm, |Kx x y| ~ 4e6 um while the x*y shape over the layout is ~0.2 um: the data
        # carry Kx only to ~1e-9 relative, and Sx, Tx about the origin inherit that times 1e6.
        assert_allclose(fit.terms[6:], truth[6:], rtol=1e-7)
    else:
        # Each term's contribution at the sites; Tx about the origin comes out of cancellation
        # between contributions of that size.
        reach = np.array([1, 1, offset, offset, offset, offset, 0, 0])
        assert_allclose(fit.terms * reach, truth * reach, rtol=0, atol=1e-11 * size)

    noisy_dx, noisy_dy = displaced(truth, pts, noise=0.3, seed=3)
    noisy = fit_measurement(pts[:, 0], pts[:, 1], noisy_dx, noisy_dy, trapezoid=trapezoid)
    # reference: numpy.linalg.lstsq on the same design in coordinates centred on the site mean
    # (uncentred, its columns are 1e12 apart); the predictions at the sites must agree.
    centre = pts.mean(axis=0)
    local = lstsq_terms(pts - centre, noisy_dx, noisy_dy, 8 if trapezoid else 6)
    got = np.stack(evaluate(noisy.terms, pts[:, 0], pts[:, 1]))
    want = np.stack(evaluate(local, pts[:, 0] - centre[0], pts[:, 1] - centre[1]))
    assert_allclose(got, want, rtol=0, atol=1e-11 * size)

    # The collinear test is scale-aware at that distance too.
    line = fit_measurement(np.full(9, offset), offset + np.linspace(-200, 200, 9), dx[:9], dy[:9])
    assert line.model == "translation" and line.note is not None and "collinear" in line.note


def test_trapezoid_recovery_needs_trapezoid_flag() -> None:
    pts = grid()
    dx, dy = displaced(TERMS, pts)
    full = fit_measurement(pts[:, 0], pts[:, 1], dx, dy, trapezoid=True)
    plain = fit_measurement(pts[:, 0], pts[:, 1], dx, dy)
    assert_allclose(full.terms[6:], TERMS[6:], rtol=1e-9)
    assert plain.model == "linear" and np.all(plain.terms[6:] == 0.0)
    # On a symmetric grid the trapezoid is orthogonal to the linear terms: same linear terms.
    assert_allclose(plain.terms[:6], TERMS[:6], rtol=1e-9, atol=1e-12)
    assert plain.sigma_um[0] > 0.0


# ------------------------------------------------------------------------------ fit_many


def mixed_batch(seed: int) -> list[tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]]:
    rng = np.random.default_rng(seed)
    batch = []
    for n in [49, 1, 2, 3, 4, 5, 49, 9, 9, 49, 1, 25]:
        pts = rng.uniform(-250, 250, size=(n, 2))
        batch.append((pts[:, 0], pts[:, 1], *displaced(TERMS, pts, noise=0.5, seed=n)))
    line = np.linspace(-200, 200, 9)
    batch.append((line, 2 * line, rng.normal(size=9), rng.normal(size=9)))  # collinear, n=9
    batch.append((np.full(9, 3.0), line, rng.normal(size=9), rng.normal(size=9)))  # vertical
    axes = np.concatenate([line, np.zeros(9)])
    batch.append(
        (axes, axes[::-1] * 0 + np.concatenate([np.zeros(9), line]), *[rng.normal(size=18)] * 2)
    )
    batch.append((*grid().T, np.zeros(49), np.zeros(49)))  # all zero
    batch.append((*(grid().T + 1e6), *displaced(TERMS, grid() + 1e6, noise=0.2, seed=9)))
    return batch


@pytest.mark.parametrize("trapezoid", [False, True])
@pytest.mark.parametrize("seed", [11, 12])
def test_fit_many_equals_fit_measurement(trapezoid: bool, seed: int) -> None:
    batch = mixed_batch(seed)
    cat = [np.concatenate([m[i] for m in batch]) for i in range(4)]
    counts = np.array([m[0].size for m in batch])
    many = fit_many(*cat, counts, trapezoid=trapezoid)
    assert len(many) == len(batch)
    for got, m in zip(many, batch, strict=True):
        one = fit_measurement(*m, trapezoid=trapezoid)
        reach = float(np.abs(np.concatenate(m[:2])).max())
        if reach < 1e3:
            assert_same_fit(got, one, reach=reach)
            assert_same_worst_site(got, one, *m)
        else:
            # At 1e6 mm the x*y term is ~1e-7 of the data (see test_huge_coordinates): the data
            # carry it only to ~1e-9, so two correct solvers agree to that, not to round-off.
            assert_same_fit(got, one, reach=reach, rtol=1e-7)
    assert {f.model for f in many} >= {"translation", "linear"}


def test_fit_many_single_site_count_and_empty() -> None:
    pts = grid()
    rng = np.random.default_rng(2)
    xs = np.tile(pts[:, 0], 20)
    ys = np.tile(pts[:, 1], 20)
    dx, dy = rng.normal(size=xs.size), rng.normal(size=xs.size)
    many = fit_many(xs, ys, dx, dy, [49] * 20)
    for j, got in enumerate(many):
        s = slice(49 * j, 49 * (j + 1))
        one = fit_measurement(xs[s], ys[s], dx[s], dy[s])
        assert_same_fit(got, one)
        assert got.max_residual_at_mm == one.max_residual_at_mm
    assert fit_many(np.zeros(0), np.zeros(0), np.zeros(0), np.zeros(0), []) == []


def test_results_are_frozen() -> None:
    pts = grid()
    fit = fit_measurement(pts[:, 0], pts[:, 1], *displaced(TERMS, pts))
    with pytest.raises(AttributeError):
        fit.model = "x"  # type: ignore[misc]
    with pytest.raises(ValueError):
        fit.terms[0] = 1.0


# ------------------------------------------------------------------------------ bad input


@pytest.mark.parametrize("name, index", [("x", 3), ("y", 0), ("dx", 7), ("dy", 48)])
@pytest.mark.parametrize("bad", [np.nan, np.inf, -np.inf])
def test_non_finite_input_names_array_and_index(name: str, index: int, bad: float) -> None:
    pts = grid()
    arrays = dict(zip(("x", "y"), pts.T.copy(), strict=True))
    arrays["dx"], arrays["dy"] = displaced(TERMS, pts)
    arrays[name][index] = bad
    with pytest.raises(OverlayInputError, match=rf"^{name}\[{index}\]"):
        fit_measurement(arrays["x"], arrays["y"], arrays["dx"], arrays["dy"])
    with pytest.raises(OverlayInputError, match=rf"^{name}\[{index}\]"):
        fit_many(arrays["x"], arrays["y"], arrays["dx"], arrays["dy"], [20, 29])


@pytest.mark.parametrize(
    "counts, message",
    [
        ([10, 10], "sum to 20"),
        ([49, 0], r"counts\[1\] is 0"),
        ([50, -1], r"counts\[1\]"),
        ([24.5, 24.5], "integers"),
    ],
)
def test_bad_counts(counts: list[float], message: str) -> None:
    pts = grid()
    dx, dy = displaced(TERMS, pts)
    with pytest.raises(OverlayInputError, match=message):
        fit_many(pts[:, 0], pts[:, 1], dx, dy, np.array(counts))


def test_mismatched_lengths_and_no_sites() -> None:
    with pytest.raises(OverlayInputError, match="dy has 2 values but x has 3"):
        fit_measurement(np.zeros(3), np.zeros(3), np.zeros(3), np.zeros(2))
    with pytest.raises(OverlayInputError, match="at least one site"):
        fit_measurement(np.zeros(0), np.zeros(0), np.zeros(0), np.zeros(0))


# ------------------------------------------------------------------------------ shared layouts


def shared_layout_batch(seed: int) -> list[tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]]:
    """Measurements on shared layouts (some degenerate) and on layouts of their own, shuffled."""
    rng = np.random.default_rng(seed)
    copies = _lsq.MIN_SHARED
    line = np.linspace(-200.0, 200.0, 9)
    square = grid(3, 3)
    near = square.copy()
    near[4, 0] = np.nextafter(near[4, 0], 1.0)  # one ulp from the 3x3 grid: not the same layout
    negative_zero = square.copy()
    negative_zero[4] = -0.0  # equal to the grid by ==, different bits: either way is correct
    layouts = [
        (square, copies + 3),
        (near, copies),
        (negative_zero, copies),
        (square + 1e6, copies),  # huge coordinates
        (grid(7, 7), 2 * copies),
        (np.stack([line, 0.5 * line + 3.0], axis=-1), copies),  # collinear
        (np.stack([np.full(9, 42.0), line], axis=-1), copies),  # vertical line
        (np.full((9, 2), 5.0), copies),  # coincident
        (np.stack([np.r_[line, np.zeros(9)], np.r_[np.zeros(9), line]], -1), copies),  # x*y = 0
        (np.array([[-100.0, -50.0], [120.0, -40.0], [0.0, 150.0]]), copies),  # 3 sites, no dof
        (np.array([[10.0, 20.0]]), copies),  # one site
        (np.array([[-100.0, 0.0], [100.0, 50.0]]), copies),  # two sites
        (grid(3, 3) * 0.5, copies - 1),  # repeated, but too few times to share an operator
    ]
    batch = []
    for pts, times in layouts:
        for _ in range(times):
            dx, dy = displaced(TERMS, pts, noise=0.5, seed=int(rng.integers(1 << 30)))
            batch.append((pts[:, 0].copy(), pts[:, 1].copy(), dx, dy))
    for n in (9, 9, 49, 18, 3, 1, 2):  # layouts of their own, in the same site-count groups
        pts = rng.uniform(-250.0, 250.0, size=(n, 2))
        batch.append((pts[:, 0], pts[:, 1], *displaced(TERMS, pts, noise=0.5, seed=n)))
    order = rng.permutation(len(batch))
    return [batch[i] for i in order]


@pytest.mark.parametrize("trapezoid", [False, True])
@pytest.mark.parametrize("seed", [21, 22])
def test_fit_many_shared_layouts_equal_fit_measurement(trapezoid: bool, seed: int) -> None:
    batch = shared_layout_batch(seed)
    cat = [np.concatenate([m[i] for m in batch]) for i in range(4)]
    many = fit_many(*cat, [m[0].size for m in batch], trapezoid=trapezoid)
    assert len(many) == len(batch)
    for got, m in zip(many, batch, strict=True):
        one = fit_measurement(*m, trapezoid=trapezoid)
        reach = float(np.abs(np.concatenate(m[:2])).max())
        if reach < 1e3:
            assert_same_fit(got, one, reach=reach)
            assert_same_worst_site(got, one, *m)
        else:
            # Terms: see test_fit_many_equals_fit_measurement. Residuals: fit_measurement solves
            # the data uncentred (~4e6 um here), so its residuals carry round-off of that size.
            size = float(np.abs(np.concatenate(m[2:])).max())
            assert_same_fit(got, one, reach=reach, rtol=1e-7, residual_atol=1e-14 * size)
    assert {f.model for f in many} == {
        "translation",
        "linear",
        "trapezoid" if trapezoid else "linear",
    }


def test_shared_layouts_are_exact() -> None:
    """The 9-site group of the batch above: which measurements share an operator."""
    batch = [m for m in shared_layout_batch(21) if m[0].size == 9]
    x, y = (np.stack([m[i] for m in batch]) for i in range(2))
    layout, reps = _lsq.shared_layouts(x, y)
    # 3x3 grid, one ulp off it, huge, collinear, vertical, coincident; the grid's twin with a -0.0
    # site compares equal, so it may share the grid's operator (same arithmetic) or have its own.
    assert reps.size in (6, 7)
    for j, r in enumerate(reps.tolist()):
        same = np.flatnonzero(layout == j)
        assert r in same and same.size >= _lsq.MIN_SHARED
        assert np.all(x[same] == x[r]) and np.all(y[same] == y[r])
    # The rest (own layouts, the grid repeated too few times) have no shared operator.
    assert np.count_nonzero(layout < 0) == 2 + _lsq.MIN_SHARED - 1


def test_hash_collisions_do_not_mix_layouts(monkeypatch: pytest.MonkeyPatch) -> None:
    # Zero weights hash every layout alike: sharing then rests on the exact comparison alone.
    monkeypatch.setattr(
        _lsq, "_hash_weights", lambda n: (np.zeros(n, np.uint64), np.zeros(n, np.uint64))
    )
    batch = [m for m in shared_layout_batch(22) if m[0].size == 9]
    square = grid(3, 3)
    on_grid = [
        np.array_equal(m[0], square[:, 0]) and np.array_equal(m[1], square[:, 1]) for m in batch
    ]
    batch.insert(0, batch.pop(on_grid.index(True)))  # the one candidate layout: the 3x3 grid
    on_grid.insert(0, on_grid.pop(on_grid.index(True)))
    x, y = (np.stack([m[i] for m in batch]) for i in range(2))
    layout, reps = _lsq.shared_layouts(x, y)
    # The grid and its -0.0 twin (equal by ==, so the same arithmetic); nothing else.
    assert reps.tolist() == [0]
    assert np.count_nonzero(layout == 0) == sum(on_grid) and np.all(layout[~np.array(on_grid)] < 0)
    cat = [np.concatenate([m[i] for m in batch]) for i in range(4)]
    for got, m in zip(fit_many(*cat, [9] * len(batch)), batch, strict=True):
        one = fit_measurement(*m)
        if float(np.abs(m[0]).max()) < 1e3:
            assert_same_fit(got, one, reach=250.0)
        else:  # see test_fit_many_shared_layouts_equal_fit_measurement
            size = float(np.abs(np.concatenate(m[2:])).max())
            assert_same_fit(got, one, reach=1e6, rtol=1e-7, residual_atol=1e-14 * size)


def test_fast_results_match_constructor() -> None:
    # fit._results sets the slots directly instead of calling __init__: nothing to skip, and the
    # objects equal the constructor's.
    assert not hasattr(OverlayFit, "__post_init__")
    pts = grid()
    dx, dy = displaced(TERMS, pts, noise=0.3)
    batch = mixed_batch(11)
    cat = [np.concatenate([m[i] for m in batch]) for i in range(4)]
    fits = fit_many(*cat, [m[0].size for m in batch], trapezoid=True)
    for f in [fit_measurement(pts[:, 0], pts[:, 1], dx, dy), *fits]:
        values = {name: getattr(f, name) for name in OverlayFit.__dataclass_fields__}
        rebuilt = OverlayFit(**values)
        assert all(getattr(rebuilt, k) is v for k, v in values.items())
        assert repr(rebuilt) == repr(f)


# ----------------------------------------------------------------------------- fit guard

CHECK_POINTS = default_check_points(510.0, 515.0)
REACH = reach_of(CHECK_POINTS)
SQUARE_10MM = (np.array([-5.0, 5.0, -5.0, 5.0]), np.array([-5.0, -5.0, 5.0, 5.0]))


def worst_vector_at_check_points(fit: OverlayFit) -> float:
    ex, ey = evaluate(fit.terms, CHECK_POINTS[:, 0], CHECK_POINTS[:, 1])
    return float(np.hypot(ex, ey).max())


def test_clustered_sites_are_guarded_down_to_the_noise_level() -> None:
    # Four sites at the corners of a 10 mm square at the panel centre, 1 um of noise per axis
    # and no true overlay. Unguarded, the linear model carries the noise of its scale and
    # rotation terms 230 mm out: a median worst vector of some 50 um at the default check
    # points (the issue measured 63 um on its own check-point layout). Guarded, the fit falls
    # back to translation: the mean of four sites, whose vector has a median length of
    # sqrt(2 ln 2) * 1/2 = 0.59 um (Rayleigh median, sigma = 1/sqrt(4)).
    rng = np.random.default_rng(63)
    bare, guarded, notes = [], [], set()
    for _ in range(400):
        dx, dy = rng.normal(0.0, 1.0, 4), rng.normal(0.0, 1.0, 4)
        bare.append(worst_vector_at_check_points(fit_measurement(*SQUARE_10MM, dx, dy)))
        fit = fit_measurement(*SQUARE_10MM, dx, dy, reach_mm=REACH)
        guarded.append(worst_vector_at_check_points(fit))
        notes.add((fit.model, fit.note))
    assert 40.0 < float(np.median(bare)) < 70.0
    assert float(np.median(guarded)) == pytest.approx(np.sqrt(2 * np.log(2)) / 2, rel=0.15)
    assert len(notes) == 1
    model, note = notes.pop()
    assert model == "translation"
    assert note is not None
    assert note.startswith("sites cover too little of the check points for 6 terms")
    assert note.endswith("fitted 2 terms")


@pytest.mark.parametrize("trapezoid", [False, True])
@pytest.mark.parametrize("seed", [0, 1, 2])
def test_leverage_agrees_with_statsmodels(trapezoid: bool, seed: int) -> None:
    # statsmodels OLS get_prediction: se_mean^2 / scale = z^T (X^T X)^-1 z, the leverage of a
    # new point. Our fit reports its largest value over the reach's corners.
    sm = pytest.importorskip("statsmodels.api")
    rng = np.random.default_rng(seed)
    x, y = rng.uniform(-120.0, 160.0, 12), rng.uniform(-200.0, 90.0, 12)
    dx, dy = rng.normal(0.0, 1.0, 12), rng.normal(0.0, 1.0, 12)
    reach = np.array([-300.0, 250.0, -240.0, 260.0])
    fit = fit_measurement(x, y, dx, dy, trapezoid=trapezoid)  # no guard: the full model
    k = 4 if trapezoid else 3
    exog = np.stack([np.ones_like(x), x, y, x * y], axis=-1)[:, :k]
    res = sm.OLS(dx, exog).fit()
    cx, cy = reach[[0, 1, 0, 1]], reach[[2, 2, 3, 3]]
    corners = np.stack([np.ones(4), cx, cy, cx * cy], axis=-1)[:, :k]
    h_ref = res.get_prediction(corners).se_mean ** 2 / res.scale
    u, v, frame = _lsq.normalise(x[np.newaxis], y[np.newaxis])
    orth = _lsq.Orthogonal(u, v, k)
    lev = _guard.reach_leverage(orth, frame, reach[np.newaxis])
    assert_allclose(lev[fit.model][0], h_ref.max(), rtol=1e-9)
    # And pointwise against numpy: z^T pinv(X^T X) z at the corners.
    pu = (cx - frame[0, 0]) / frame[0, 2]
    pv = (cy - frame[0, 1]) / frame[0, 2]
    h_np = np.einsum("mi,ij,mj->m", corners, np.linalg.pinv(exog.T @ exog), corners)
    h_ours = _guard.leverage(orth, pu[np.newaxis], pv[np.newaxis])[0, :, k - 1]
    assert_allclose(h_ours, h_np, rtol=1e-9)
    assert_allclose(h_np, h_ref, rtol=1e-9)


def test_leverage_maximum_over_a_box_is_at_a_corner() -> None:
    # The guard evaluates the reach's corners only; check on a dense grid that nothing inside
    # the box is worse (h is convex along each axis-parallel line).
    rng = np.random.default_rng(5)
    x, y = rng.uniform(-100.0, 100.0, 9), rng.uniform(-100.0, 100.0, 9)
    u, v, frame = _lsq.normalise(x[np.newaxis], y[np.newaxis])
    orth = _lsq.Orthogonal(u, v, 4)
    gx, gy = np.meshgrid(np.linspace(-250, 250, 41), np.linspace(-260, 260, 41))
    pu = ((gx.ravel() - frame[0, 0]) / frame[0, 2])[np.newaxis]
    pv = ((gy.ravel() - frame[0, 1]) / frame[0, 2])[np.newaxis]
    inside = _guard.leverage(orth, pu, pv)[0].max(axis=0)
    box = _guard.reach_leverage(orth, frame, np.array([[-250.0, 250.0, -260.0, 260.0]]))
    assert_allclose(box["trapezoid"][0], inside[3], rtol=1e-12)
    assert_allclose(box["linear"][0], inside[2], rtol=1e-12)


def test_guard_steps_down_one_model_at_a_time() -> None:
    # A 3 x 3 grid: across the whole reach it keeps the trapezoid; over 300 mm it drops the
    # x*y terms only; over 100 mm it keeps translation alone.
    def grid_fit(half: float) -> OverlayFit:
        g = np.linspace(-half, half, 3)
        gx, gy = np.meshgrid(g, g)
        zeros = np.zeros(9)
        return fit_measurement(gx.ravel(), gy.ravel(), zeros, zeros, trapezoid=True,
                               reach_mm=REACH)

    wide, middle, narrow = grid_fit(230.0), grid_fit(150.0), grid_fit(50.0)
    assert (wide.model, wide.note) == ("trapezoid", None)
    assert middle.model == "linear"
    assert middle.note is not None and "for 8 terms" in middle.note
    assert narrow.model == "translation"
    assert narrow.note is not None and "for 6 terms" in narrow.note
    assert "for 8 terms" not in narrow.note  # said once, at the linear step
    for fit in (wide, middle, narrow):
        assert fit.leverage <= 1.0 + 1e-9


def test_four_sites_at_the_reach_corners_keep_the_trapezoid() -> None:
    # h = 1 exactly at the sites (four sites, four terms): the guard's margin keeps it.
    x, y = REACH[[0, 1, 0, 1]], REACH[[2, 2, 3, 3]]
    fit = fit_measurement(x, y, np.zeros(4), np.zeros(4), trapezoid=True, reach_mm=REACH)
    assert fit.model == "trapezoid"
    assert fit.leverage == pytest.approx(1.0, abs=1e-9)


def test_fit_many_guard_per_measurement_reach_equals_single() -> None:
    rng = np.random.default_rng(11)
    pts = grid(3, 3, 60.0, 60.0)
    n = len(pts)
    g = 40
    x = np.tile(pts[:, 0], g)
    y = np.tile(pts[:, 1], g)
    dx, dy = rng.normal(0.0, 1.0, n * g), rng.normal(0.0, 1.0, n * g)
    reach = np.where(np.arange(g)[:, np.newaxis] % 2 == 0, REACH, [-70.0, 70.0, -70.0, 70.0])
    many = fit_many(x, y, dx, dy, np.full(g, n), reach_mm=reach)
    assert {f.model for f in many} == {"translation", "linear"}
    for i, f in enumerate(many):
        sl = slice(i * n, (i + 1) * n)
        assert_same_fit(f, fit_measurement(x[sl], y[sl], dx[sl], dy[sl], reach_mm=reach[i]))


@pytest.mark.parametrize(
    "reach, message",
    [
        ([0.0, 1.0, 2.0], "shape"),
        ([0.0, 1.0, 2.0, float("nan")], "finite"),
        ([5.0, 1.0, 0.0, 1.0], "lo <= hi"),
    ],
)
def test_bad_reach(reach: list[float], message: str) -> None:
    pts = grid(3, 3)
    with pytest.raises(OverlayInputError, match=message):
        fit_measurement(pts[:, 0], pts[:, 1], np.zeros(9), np.zeros(9), reach_mm=reach)
