"""Side-B mirror: involution, commutes with the fit, and the sign table of docs/conventions.md."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp
from numpy.testing import assert_allclose, assert_array_equal

from app.overlay.errors import OverlayInputError
from app.overlay.fit import fit_measurement
from app.overlay.frames import mirror_covariance, mirror_sites, mirror_terms
from app.overlay.model import TERM_NAMES, evaluate

# Fixed seed for the property tests: the same examples on every run.
PROPERTY = settings(derandomize=True, database=None, max_examples=150, deadline=None)

coordinates = hnp.arrays(
    np.float64, st.integers(1, 30), elements=st.floats(-300, 300, allow_nan=False, width=64)
)
term_vectors = hnp.arrays(np.float64, 8, elements=st.floats(-1e3, 1e3, allow_nan=False))
flip_axes = st.sampled_from(["x", "y"])


@PROPERTY
@given(coordinates, flip_axes)
def test_mirroring_sites_twice_is_identity(a: np.ndarray, flip_axis: str) -> None:
    x, y, dx, dy = a, a[::-1].copy(), 2 * a, a + 1
    once = mirror_sites(x, y, dx, dy, side="B", flip_axis=flip_axis)
    twice = mirror_sites(*once, side="B", flip_axis=flip_axis)
    for got, want in zip(twice, (x, y, dx, dy), strict=True):
        assert_array_equal(got, want)
    for got, want in zip(
        mirror_sites(x, y, dx, dy, side="A", flip_axis=flip_axis), (x, y, dx, dy), strict=True
    ):
        assert_array_equal(got, want)


@PROPERTY
@given(term_vectors, flip_axes)
def test_mirroring_terms_twice_is_identity(terms: np.ndarray, flip_axis: str) -> None:
    twice = mirror_terms(
        mirror_terms(terms, side="B", flip_axis=flip_axis), side="B", flip_axis=flip_axis
    )
    assert_array_equal(twice, terms)
    cov = np.outer(terms, terms)
    back = mirror_covariance(
        mirror_covariance(cov, side="B", flip_axis=flip_axis), side="B", flip_axis=flip_axis
    )
    assert_array_equal(back, cov)


# Sites on a 0.5 mm lattice: exact degeneracies (collinear, coincident) occur, near-degenerate
# layouts are bounded away from the rank threshold, so the property is not at the mercy of
# round-off in the rank decision.
lattice_sites = st.lists(
    st.tuples(st.integers(-500, 500), st.integers(-500, 500)), min_size=1, max_size=40
).map(lambda s: np.array(s, dtype=np.float64).reshape(-1, 2) * 0.5)
small_terms = st.tuples(
    st.floats(-20, 20),
    st.floats(-20, 20),
    *[st.floats(-0.05, 0.05)] * 4,
    *[st.floats(-1e-4, 1e-4)] * 2,
).map(lambda t: np.array(t))


@PROPERTY
@given(lattice_sites, small_terms, flip_axes, st.booleans(), st.integers(0, 2**32 - 1))
def test_mirror_terms_of_fit_equals_fit_of_mirrored_sites(
    pts: np.ndarray, terms: np.ndarray, flip_axis: str, trapezoid: bool, seed: int
) -> None:
    rng = np.random.default_rng(seed)
    dx, dy = evaluate(terms, pts[:, 0], pts[:, 1])
    dx, dy = dx + rng.normal(0, 0.5, dx.shape), dy + rng.normal(0, 0.5, dy.shape)
    tool = fit_measurement(pts[:, 0], pts[:, 1], dx, dy, trapezoid=trapezoid)
    mirrored = mirror_sites(pts[:, 0], pts[:, 1], dx, dy, side="B", flip_axis=flip_axis)
    panel = fit_measurement(*mirrored, trapezoid=trapezoid)
    assert panel.model == tool.model
    reach = np.array([1, 1, 250, 250, 250, 250, 250**2, 250**2])  # contribution at 250 mm
    assert_allclose(
        mirror_terms(tool.terms, side="B", flip_axis=flip_axis) * reach,
        panel.terms * reach,
        rtol=0,
        atol=1e-6 * max(1.0, float(np.abs(tool.terms * reach).max())),
    )
    assert_allclose(panel.sigma_um, tool.sigma_um, rtol=1e-9, atol=1e-9)


# conventions.md, flip about y: Tx, Ox, Oy change sign; Sx, Sy unchanged; Kx unchanged, Ky changes.
# Flip about x, derived the same way (exchange the roles of x and y): Ty, Ox, Oy, Kx change.
SIGN_TABLE = {
    "y": {"Tx": -1, "Ty": 1, "Sx": 1, "Sy": 1, "Ox": -1, "Oy": -1, "Kx": 1, "Ky": -1},
    "x": {"Tx": 1, "Ty": -1, "Sx": 1, "Sy": 1, "Ox": -1, "Oy": -1, "Kx": -1, "Ky": 1},
}


@pytest.mark.parametrize("flip_axis", ["y", "x"])
@pytest.mark.parametrize("name", TERM_NAMES)
def test_sign_table_term_by_term(flip_axis: str, name: str) -> None:
    i = TERM_NAMES.index(name)
    terms = np.zeros(8)
    terms[i] = [2.0, -3.0, 1e-3, 2e-3, 3e-3, -1e-3, 1e-6, 2e-6][i]
    gx, gy = np.meshgrid(np.linspace(-240, 240, 5), np.linspace(-240, 240, 5))
    x, y = gx.ravel(), gy.ravel()
    dx, dy = evaluate(terms, x, y)
    # Fitting the mirrored sites gives the mirrored term with the sign of the table ...
    fitted = fit_measurement(
        *mirror_sites(x, y, dx, dy, side="B", flip_axis=flip_axis), trapezoid=True
    ).terms
    expected = np.zeros(8)
    expected[i] = SIGN_TABLE[flip_axis][name] * terms[i]
    assert_allclose(fitted, expected, rtol=1e-9, atol=1e-15)
    # ... and mirror_terms applies the same sign.
    assert_allclose(mirror_terms(terms, side="B", flip_axis=flip_axis), expected, rtol=0)


def test_side_a_is_identity_and_bad_options() -> None:
    terms = np.arange(8.0)
    assert_array_equal(mirror_terms(terms, side="A", flip_axis="y"), terms)
    with pytest.raises(OverlayInputError, match="side"):
        mirror_terms(terms, side="C", flip_axis="y")
    with pytest.raises(OverlayInputError, match="flip_axis"):
        mirror_terms(terms, side="B", flip_axis="z")
