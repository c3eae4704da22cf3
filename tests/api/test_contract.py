"""The HTTP contract: methods per path, the OpenAPI document (errors of secured routes,
examples), strict numbers for products, malformed JSON placed in lines and columns, and the
Prometheus exposition (bounded labels, latency histogram)."""

from __future__ import annotations

import json

import pytest

from app.main import create_app
from tests.factories import client, make_keys, make_panel, make_product, product_data


@pytest.fixture
def setup(db):
    make_product(db)
    make_panel(db, "P1")
    return db, client(db), make_keys(db)


@pytest.mark.parametrize("path,allowed", [
    ("/api/v1/panels", "GET, OPTIONS, POST"), ("/api/v1/panels/P1", "GET, OPTIONS"),
    ("/api/v1/panels/P1/holds", "OPTIONS, POST"), ("/metrics", "GET, OPTIONS"),
    ("/api/v1/holds/123/disposition", "OPTIONS, POST"),
])
def test_options_and_405_name_every_method_of_the_path(setup, path, allowed):
    _, c, _ = setup
    r = c.options(path)
    assert r.status_code == 204 and r.headers["allow"] == allowed
    wrong = c.request("DELETE", path)
    assert wrong.status_code == 405 and wrong.headers["allow"] == allowed
    assert c.options("/api/v1/nothing-here").status_code == 404


def test_every_secured_operation_documents_401_and_403():
    spec = create_app().openapi()
    for path, operations in spec["paths"].items():
        for method, operation in operations.items():
            if path == "/api/v1/health":
                continue
            codes = set(operation["responses"])
            assert {"401", "403"} <= codes, (method, path, codes)
            assert "application/problem+json" in operation["responses"]["401"]["content"]


def _unexampled(node, covered=False):
    """Map and pair schemas under ``node`` with no example on themselves or above."""
    if isinstance(node, list):
        for item in node:
            yield from _unexampled(item, covered)
    elif isinstance(node, dict):
        covered = covered or bool(node.get("examples"))
        if ("prefixItems" in node or isinstance(node.get("additionalProperties"), dict)) \
                and not covered:
            yield node
        for value in node.values():
            yield from _unexampled(value, covered)


def test_openapi_maps_and_pairs_carry_examples():
    """Swagger UI makes up 'additionalProp1' for a map and [null, null] for a pair whose schema
    has no example; each such schema (or the field holding it) names one."""
    schemas = create_app().openapi()["components"]["schemas"]
    assert sum(json.dumps(s).count("prefixItems") for s in schemas.values()) >= 1
    for name, schema in schemas.items():
        for field, sub in schema.get("properties", {}).items():
            assert not list(_unexampled(sub)), (name, field)


@pytest.mark.parametrize("override,pointer", [
    ({"check_points_mm": [[0, False]]}, "/check_points_mm/0/1"),
    ({"check_points_mm": [[0, "1"]]}, "/check_points_mm/0/1"),
    ({"check_points_mm": [[0]]}, "/check_points_mm/0/1"),
    ({"check_points_mm": [[0, 1, 2]]}, "/check_points_mm/0"),
    ({"panel_width_mm": 5e-324}, "/panel_width_mm"),
    ({"panel_height_mm": 19.9}, "/panel_height_mm"),
    ({"panel_width_mm": 2000.5}, "/panel_width_mm"),
    ({"ftb_limit_um": "1e400"}, "/ftb_limit_um"),  # sent as the bare JSON number 1e400
    ({"check_points_mm": [[300, 0]]}, "/"),  # outside a 510 mm wide panel
])
def test_product_numbers_are_strict_and_bounded(setup, override, pointer):
    _, c, k = setup
    body = json.dumps(product_data(code="NEW", **override)).replace('"1e400"', "1e400")
    r = c.post("/api/v1/products", content=body,
               headers={**k.headers("admin"), "content-type": "application/json"})
    assert r.status_code == 422, r.text
    assert pointer in [e.get("pointer") for e in r.json()["errors"]]


def test_product_at_the_bounds_is_taken(setup):
    _, c, k = setup
    r = c.post("/api/v1/products", json=product_data(
        code="COUPON", panel_width_mm=20, panel_height_mm=2000, check_points_mm=[[10, -1000]]),
        headers=k.headers("admin"))
    assert r.status_code == 201, r.text
    assert r.json()["check_points_mm"] == [[10.0, -1000.0]]


def test_malformed_json_is_placed_in_lines_and_columns(setup):
    _, c, k = setup
    body = b'{\n  "serial": "P2",\n  "product": TESTPROD\n}'
    r = c.post("/api/v1/panels", content=body,
               headers={**k.headers("engineer"), "content-type": "application/json"})
    assert r.status_code == 422
    (error,) = r.json()["errors"]
    assert "pointer" not in error
    # Line 3 is '  "product": TESTPROD'; the parser stops at the T, column 14.
    assert "line 3, column 14" in error["message"] and "line 3, column 14" in r.json()["detail"]


def test_metrics_labels_are_bounded_and_latency_is_a_histogram(setup):
    _, c, k = setup
    for i in range(30):
        c.request(f"M{i}", "/api/v1/health")
        c.get(f"/api/v1/no-such-{i}")
    c.get("/api/v1/panels/P1", headers=k.headers("engineer"))
    r = c.get("/metrics", headers=k.headers("uploader"))
    assert r.status_code == 200
    series = [ln for ln in r.text.splitlines() if ln.startswith("stackledger_http_requests_total")]
    methods = {ln.split('method="')[1].split('"')[0] for ln in series}
    routes = {ln.split('route="')[1].split('"')[0] for ln in series}
    assert methods <= {"GET", "POST", "OPTIONS", "other"} and "other" in methods
    assert routes == {"/api/v1/health", "unmatched", "/api/v1/panels/{serial}"}
    assert len(series) <= 6
    # Prometheus text format: cumulative buckets ending in +Inf equal to _count.
    labels = 'method="GET",route="/api/v1/panels/{serial}",status="200"'
    buckets = [int(ln.rsplit(" ", 1)[1]) for ln in r.text.splitlines()
               if ln.startswith(f"stackledger_http_request_duration_seconds_bucket{{{labels}")]
    assert buckets == sorted(buckets) and buckets[-1] == 1
    assert f"stackledger_http_request_duration_seconds_count{{{labels}}} 1" in r.text
    assert "# TYPE stackledger_http_request_duration_seconds histogram" in r.text
    assert 'stackledger_panels_by_risk{risk="over_limit"} 0' in r.text
    assert "stackledger_open_holds 0" in r.text


def test_figures_are_rounded_at_the_edge(setup):
    _, c, k = setup
    # Scale 10 ppm and a rotation of 0 computed from noisy-free sites: the fit returns values
    # like 10.000000000000002 ppm and 4.8e-16 urad, which the API gives as 10.0 and 0.0.
    from tests.factories import measurement

    r = c.post("/api/v1/measurements",
               json=measurement("P1", 1, "A", (1 / 3, 0.0, 0.01, 0.01, 1e-19, 0.0)),
               headers=k.headers("uploader"))
    assert r.status_code == 201, r.text
    fit = r.json()["fit"]
    assert fit["tx_um"] == 0.333 and fit["sx_ppm"] == 10.0 and fit["sy_ppm"] == 10.0
    assert fit["ox_urad"] == 0.0 and fit["rotation_urad"] == 0.0
    for value in (fit["sigma_x_um"], fit["mean_plus_3sigma_x_um"], fit["largest_residual_um"]):
        assert value == round(value, 3)
    state = r.json()["panel_after"]
    assert state["forecast"]["p_final_over_limit"] == round(
        state["forecast"]["p_final_over_limit"], 4
    )
    assert all(p["length_um"] == round(p["length_um"], 3) for p in state["ftb_current_points"])
    assert "-0.0" not in r.text
