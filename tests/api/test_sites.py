"""GET /api/v1/panels/{serial}/sites: measured and residual site vectors in the panel frame."""

from __future__ import annotations

import numpy as np

from tests.factories import client, make_keys, make_panel, make_product, measurement


def test_residuals_match_an_independent_least_squares_fit(db):
    make_product(db)
    make_panel(db)
    k = make_keys(db)
    c = client(db)
    terms = (3.0, -2.0, 0.004, -0.003, 0.002, 0.001)
    for side in ("A", "B"):
        r = c.post("/api/v1/measurements", json=measurement("P0001", 1, side, terms, noise=0.8,
                                                            seed=7),
                   headers=k.headers("uploader"))
        assert r.status_code == 201, r.text
    body = c.get("/api/v1/panels/P0001/sites", headers=k.headers("engineer")).json()
    assert [(m["side"], m["layer"]) for m in body["layers"]] == [("A", 1), ("B", 1)]
    for layer in body["layers"]:
        s = layer["sites"]
        x, y = np.array([p["x_mm"] for p in s]), np.array([p["y_mm"] for p in s])
        d = np.concatenate([[p["dx_um"] for p in s], [p["dy_um"] for p in s]])
        one, nil = np.ones_like(x), np.zeros_like(x)
        # The six-term model written out here, solved by numpy.linalg.lstsq (the reference).
        a = np.block([[one[:, None], nil[:, None], x[:, None], nil[:, None], -y[:, None],
                       nil[:, None]],
                      [nil[:, None], one[:, None], nil[:, None], y[:, None], nil[:, None],
                       x[:, None]]])
        coef, *_ = np.linalg.lstsq(a, d, rcond=None)
        expected = d - a @ coef
        got = np.concatenate([[p["residual_dx_um"] for p in s],
                              [p["residual_dy_um"] for p in s]])
        np.testing.assert_allclose(got, expected, atol=1e-6)
        assert np.abs(got).max() > 0.1  # the noise is there, not fitted away
    # Side B is shown in the panel frame: the flip about y negates x of the posted sites.
    posted_b = measurement("P0001", 1, "B", terms, noise=0.8, seed=7)["sites"]
    shown_b = body["layers"][1]["sites"]
    np.testing.assert_allclose([p["x_mm"] for p in shown_b], [-p["x_mm"] for p in posted_b])
    np.testing.assert_allclose([p["dx_um"] for p in shown_b], [-p["dx_um"] for p in posted_b])


def test_sites_filters_and_unknown_panel(db):
    make_product(db)
    make_panel(db)
    k = make_keys(db)
    c = client(db)
    c.post("/api/v1/measurements", json=measurement("P0001", 1, "A"), headers=k.headers("uploader"))
    h = k.headers("engineer")
    assert c.get("/api/v1/panels/P0001/sites?side=B", headers=h).json()["layers"] == []
    assert len(c.get("/api/v1/panels/P0001/sites?side=A&layer=1", headers=h).json()[
        "layers"]) == 1
    assert c.get("/api/v1/panels/NOPE/sites", headers=h).status_code == 404
    assert c.get("/api/v1/panels/P0001/sites?layer=0", headers=h).status_code == 422
