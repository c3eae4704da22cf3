"""Via settings on a product: validation, round trip, and the capture figures of a panel."""

from __future__ import annotations

import pytest
from scipy import stats

from tests.factories import client, make_keys, make_panel, measurement, product_data

VIAS = {
    "via_diameter_um": 35.0, "pad_diameter_um": 65.0,
    "layers": [{"layer": 1, "via_diameter_um": 50.0, "pad_diameter_um": 90.0}],
    "copper_thickness_um": 15.0, "via_depth_um": 25.0,
}


@pytest.fixture
def setup(db):
    return db, client(db), make_keys(db)


def _create(c, k, **overrides):
    return c.post("/api/v1/products", json=product_data(**overrides), headers=k.headers("admin"))


@pytest.mark.parametrize(
    "vias, pointer, words",
    [
        ({**VIAS, "pad_diameter_um": 35.0}, "/vias", "must be larger than via_diameter_um"),
        ({**VIAS, "via_diameter_um": 0.0}, "/vias/via_diameter_um", "greater than 0"),
        ({**VIAS, "layers": [{"layer": 2, "via_diameter_um": 60.0, "pad_diameter_um": 50.0}]},
         "/vias/layers/0", "must be larger than via_diameter_um"),
        ({**VIAS, "layers": [VIAS["layers"][0], VIAS["layers"][0]]}, "/vias",
         "layer 1 more than once"),
        ({**VIAS, "layers": [{"layer": 13, "via_diameter_um": 30.0, "pad_diameter_um": 60.0}]},
         "/", "beyond layers_per_side"),
        ({**VIAS, "copper_thickness_um": -1.0}, "/vias/copper_thickness_um", "greater than 0"),
        ({**VIAS, "length_um": 2000.0}, "/vias/length_um", "xtra"),
    ],
)
def test_bad_via_settings_are_422_saying_where(setup, vias, pointer, words):
    _db, c, k = setup
    r = _create(c, k, vias=vias)
    assert r.status_code == 422, r.text
    body = r.json()
    assert any(e.get("pointer", "") == pointer and words in e["message"]
               for e in body["errors"]), body


def test_via_settings_round_trip_and_repeat(setup):
    _db, c, k = setup
    r = _create(c, k, vias=VIAS)
    assert r.status_code == 201, r.text
    got = r.json()["vias"]
    assert got["layers"] == VIAS["layers"]
    assert got["resistivity_ohm_m"] == 1.68e-8  # OpenStax copper at 20 C, the default
    assert got["pad_width_um"] is None
    assert _create(c, k, vias=VIAS).status_code == 200  # identical repeat
    assert _create(c, k, vias={**VIAS, "pad_diameter_um": 70.0}).status_code == 409
    assert c.get("/api/v1/products/TESTPROD", headers=k.headers("uploader")).json()["vias"] == got


def _post(c, k, serial, layer, side, tx, noise=0.0):
    r = c.post("/api/v1/measurements",
               json=measurement(serial, layer, side, (tx,), frame="panel", noise=noise),
               headers=k.headers("uploader"))
    assert r.status_code == 201, r.text
    return r.json()


def test_capture_margin_judges_l2l_when_the_product_has_vias(setup):
    db, c, k = setup
    assert _create(c, k, vias=VIAS).status_code == 201
    make_panel(db, "V1")
    # 14 um: over the 12 um L2L limit but inside layer 2's 15 um capture margin.
    _post(c, k, "V1", 1, "A", 0.0)
    state = _post(c, k, "V1", 2, "A", 14.0)["panel_after"]
    assert state["risk"] != "over_limit", state["reasons"]
    stack = c.get("/api/v1/panels/V1/stack", headers=k.headers("engineer")).json()
    layer2 = next(x for x in stack["layers"] if (x["side"], x["layer"]) == ("A", 2))
    assert layer2["capture_margin_um"] == 15.0 and layer2["overhang_um"] == pytest.approx(-1.0)
    # An exact fit (no noise): sigma is round-off, so the miss probability is that of a known
    # offset 1 um inside its margin.
    assert layer2["p_miss"] == pytest.approx(0.0, abs=1e-12)
    assert layer2["fit_se_um"] == pytest.approx(0.0, abs=1e-9)
    layer1 = next(x for x in stack["layers"] if (x["side"], x["layer"]) == ("A", 1))
    assert layer1["capture_margin_um"] == 20.0  # the per-layer pair
    # reference: OpenStax R = rho L / A; lateral path 14 um at every point through a 65 um
    # wide (the pad diameter), 15 um thick pad: 1.68e-8 * 14e-6 / (65e-6 * 15e-6).
    via = stack["stacked_via"]
    assert via["lateral_um"] == pytest.approx(14.0)
    assert via["extra_ohm"] == pytest.approx(1.68e-8 * 14e-6 / (65e-6 * 15e-6), rel=1e-9)
    assert via["relative"] == pytest.approx(via["extra_ohm"] / via["chain_ohm"])
    # 18 um on layer 3: 3 um past its pad edge.
    state = _post(c, k, "V1", 3, "A", 18.0)["panel_after"]
    assert state["risk"] == "over_limit"
    assert any(r.startswith("Via on layer 3 side A can miss its pad by 3.0 um")
               and "capture margin of 15.0 um" in r for r in state["reasons"]), state["reasons"]


def test_miss_probability_with_noise_matches_rice(setup):
    db, c, k = setup
    assert _create(c, k, vias=VIAS).status_code == 201
    make_panel(db, "V2")
    fit = _post(c, k, "V2", 2, "A", 12.0, noise=1.0)["fit"]
    stack = c.get("/api/v1/panels/V2/stack", headers=k.headers("engineer")).json()
    layer = stack["layers"][0]
    # Residual sigmas differ per axis, so the service took the quadrature path; the Rice tail
    # with the larger sigma bounds it from above, with the smaller from below
    # (reference: scipy.stats.rice; a wider isotropic normal puts more mass outside the disc).
    h = fit["leverage"]
    s_lo, s_hi = (min(fit["sigma_x_um"], fit["sigma_y_um"]) * (1 + h) ** 0.5,
                  max(fit["sigma_x_um"], fit["sigma_y_um"]) * (1 + h) ** 0.5)
    worst = layer["overhang_um"] + 15.0
    lo = stats.rice.sf(15.0, worst / s_lo, scale=s_lo)
    hi = stats.rice.sf(15.0, worst / s_hi, scale=s_hi)
    assert lo - 1e-9 <= layer["p_miss"] <= hi + 1e-9
    assert 0.0 < h <= 1.0
