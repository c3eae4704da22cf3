"""Odd input from any caller is a 422 problem that says where, on both databases: control
characters in every kind of string, tampered cursors, serials that are not path segments and
query parameters the route does not know."""

from __future__ import annotations

import base64
import json
import uuid

import pytest

from app.schemas.text import control_problem
from tests.factories import client, make_keys, make_panel, make_product, measurement


@pytest.fixture
def setup(db):
    make_product(db)
    make_panel(db, "A-1")
    return db, client(db), make_keys(db)


def _cursor(raw: bytes | object) -> str:
    data = raw if isinstance(raw, bytes) else json.dumps(raw).encode()
    return base64.urlsafe_b64encode(data).decode()


NUL_REQUESTS = [
    ("GET", "/api/v1/panels/A-1%00", None, "path:/serial"),
    ("GET", "/api/v1/panels/A-1%00/stack", None, "path:/serial"),
    ("GET", "/api/v1/products/X%00", None, "path:/code"),
    ("GET", "/api/v1/panels?lot=a%00b", None, "query:/lot"),
    ("GET", "/api/v1/panels?product=%01", None, "query:/product"),
    ("POST", "/api/v1/panels", {"serial": "A-2", "product": "TESTPROD", "lot": "x\x00"}, "/lot"),
    ("POST", "/api/v1/panels", {"serial": "A\x002", "product": "TESTPROD", "lot": "x"},
     "/serial"),
    ("POST", "/api/v1/panels/A-1/holds", {"reason": "see\x00here"}, "/reason"),
    ("POST", "/api/v1/measurements", {**measurement("A-1", 1, "A"), "exposure_tool": "T\x00"},
     "/exposure_tool"),
    ("POST", "/api/v1/measurements", {**measurement("A-1", 1, "A"), "panel": "A-1\x00"},
     "/panel"),
]


@pytest.mark.parametrize("method,url,body,pointer", NUL_REQUESTS,
                         ids=[f"{m} {u} {p}" for m, u, _, p in NUL_REQUESTS])
def test_control_characters_are_refused_where_they_are(setup, method, url, body, pointer):
    _, c, k = setup
    r = c.request(method, url, json=body, headers=k.headers("admin"))
    assert r.status_code == 422, r.text
    assert r.headers["content-type"] == "application/problem+json"
    assert pointer in [e.get("pointer") for e in r.json()["errors"]]


def test_free_text_keeps_line_breaks_but_names_do_not(setup):
    _, c, k = setup
    r = c.post("/api/v1/panels/A-1/holds", json={"reason": "line one\r\nline two\ttabbed"},
               headers=k.headers("engineer"))
    assert r.status_code == 201, r.text
    r = c.post("/api/v1/panels", json={"serial": "A-3", "product": "TESTPROD", "lot": "a\nb"},
               headers=k.headers("engineer"))
    assert r.status_code == 422
    assert "U+000A at position 2" in r.json()["errors"][0]["message"]


def test_disposition_note_with_nul_is_refused(setup):
    _, c, k = setup
    hold = c.post("/api/v1/panels/A-1/holds", json={"reason": "look"},
                  headers=k.headers("engineer")).json()
    r = c.post(f"/api/v1/holds/{hold['id']}/disposition",
               json={"action": "release", "note": "ok\x00"}, headers=k.headers("supervisor"))
    assert r.status_code == 422 and r.json()["errors"][0]["pointer"] == "/note"


@pytest.mark.parametrize("value,problem", [
    ("P-0001", None), ("tab\tin name", "U+0009 at position 4"), ("\x00", "NUL at position 1"),
    ("del\x7f", "U+007F at position 4"),
])
def test_control_problem(value, problem):
    found = control_problem(value)
    assert (found is None) if problem is None else (problem in found)


PANEL_CURSORS = [
    ("serial", [None, "A-1"]),
    ("serial", [{"a": 1}, "A-1"]),
    ("serial", [1, "A-1"]),
    ("serial", ["a\x00", "A-1"]),
    ("serial", ["A-1", None]),
    ("serial", ["A-1"]),
    ("updated", ["not a date", "A-1"]),
    ("updated", ["2026-01-01T00:00:00", "A-1"]),
    ("ftb_current", [True, "A-1"]),
    ("ftb_current", ["1.5", "A-1"]),
    ("p_final_over_limit", [[1], "A-1"]),
    ("ftb_current", b'[1e400, "A-1"]'),
    ("ftb_current", b'[NaN, "A-1"]'),
    ("serial", b"\xff\xfe"),
    ("serial", {"a": 1}),
    ("serial", b"[" * 5000),
]


@pytest.mark.parametrize("sort,raw", PANEL_CURSORS, ids=[repr(r) for _, r in PANEL_CURSORS])
def test_tampered_panel_cursors_are_422(setup, sort, raw):
    _, c, k = setup
    r = c.get(f"/api/v1/panels?sort={sort}&cursor={_cursor(raw)}", headers=k.headers("engineer"))
    assert r.status_code == 422, r.text
    assert r.json()["errors"][0]["pointer"] == "query:/cursor"


HOLD_CURSORS = [
    b'[1e400, "2026-01-01T00:00:00+00:00", "A-1", "%s"]' % str(uuid.uuid4()).encode(),
    json.dumps([1, "2026-01-01T00:00:00+00:00", "A\x00", str(uuid.uuid4())]).encode(),
    json.dumps([1.5, "2026-01-01T00:00:00+00:00", "A-1", str(uuid.uuid4())]).encode(),
    json.dumps([1, "2026-01-01T00:00:00+00:00", "A-1", "not-an-id"]).encode(),
    json.dumps([2**40, "2026-01-01T00:00:00+00:00", "A-1", str(uuid.uuid4())]).encode(),
]


@pytest.mark.parametrize("raw", HOLD_CURSORS)
def test_tampered_hold_cursors_are_422(setup, raw):
    _, c, k = setup
    r = c.get(f"/api/v1/holds?cursor={_cursor(raw)}", headers=k.headers("engineer"))
    assert r.status_code == 422, r.text


@pytest.mark.parametrize("serial", [".", "..", "...", ".hidden", "-x", "a/b", "a b", "é1"])
def test_serials_that_are_not_path_segments_are_refused(setup, serial):
    _, c, k = setup
    r = c.post("/api/v1/panels", json={"serial": serial, "product": "TESTPROD", "lot": "L"},
               headers=k.headers("engineer"))
    assert r.status_code == 422 and r.json()["errors"][0]["pointer"] == "/serial"


@pytest.mark.parametrize("serial", ["A1", "0.5", "P-01:2", "lot_7.a"])
def test_every_accepted_serial_is_reachable_by_path(setup, serial):
    _, c, k = setup
    r = c.post("/api/v1/panels", json={"serial": serial, "product": "TESTPROD", "lot": "L"},
               headers=k.headers("engineer"))
    assert r.status_code == 201, r.text
    got = c.get(f"/api/v1/panels/{serial}", headers=k.headers("engineer"))
    assert got.status_code == 200 and got.json()["serial"] == serial


@pytest.mark.parametrize("url,name", [
    ("/api/v1/panels?tool=X", "tool"), ("/api/v1/panels?since=2026-01-01", "since"),
    ("/api/v1/holds?status=open", "status"), ("/api/v1/panels/A-1?verbose=1", "verbose"),
])
def test_unknown_query_parameters_are_named(setup, url, name):
    _, c, k = setup
    r = c.get(url, headers=k.headers("engineer"))
    assert r.status_code == 422
    (error,) = r.json()["errors"]
    assert error["pointer"] == f"query:/{name}" and repr(name) in error["message"]


def test_known_query_parameters_still_work(setup):
    _, c, k = setup
    r = c.get("/api/v1/panels?lot=LOT1&sort=serial&order=desc&limit=5",
              headers=k.headers("engineer"))
    assert r.status_code == 200 and [p["serial"] for p in r.json()["items"]] == ["A-1"]
