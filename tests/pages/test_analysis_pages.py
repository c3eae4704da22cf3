"""The analysis and lot pages through httpx on both databases: what each role sees, the product
chosen by default, the lot summary's panels and histogram, and bad input answered with a
clear 4xx page, never a 500."""

from __future__ import annotations

import re

import pytest

from tests.factories import client, make_keys, make_panel, make_product, measurement
from tests.pages.helpers import page_client, sign_in

PAGES = ("/lots", "/analysis/fingerprints", "/analysis/drift", "/analysis/alarms",
         "/analysis/shares")
NAV = re.compile(r'<nav aria-label="Pages">(.*?)</nav>', re.S)


def _line(db):
    """Two products; three panels of TESTPROD in two lots, both sides measured on two tools."""
    make_product(db, code="AAA", ftb_limit_um=40.0)
    make_product(db)
    k = make_keys(db)
    api = client(db)
    for i, (lot, tx) in enumerate((("LOTA", 2.0), ("LOTA", 4.0), ("LOTB", 30.0)), 1):
        serial = make_panel(db, f"P000{i}", lot=lot)
        for side, tool in (("A", "EXP-T1"), ("B", "EXP-T2")):
            r = api.post("/api/v1/measurements", headers=k.headers("uploader"),
                         json=measurement(serial, 1, side, (tx if side == "A" else -tx,),
                                          tool=tool, minutes=i * 100 + (side == "B")))
            assert r.status_code in (200, 201), r.text
    return k


def test_who_sees_the_pages_and_who_is_refused(db):
    k = _line(db)
    tool = page_client(db)
    sign_in(tool, k["uploader"])
    nav = NAV.search(tool.get("/rejected-uploads").text).group(1)
    assert all(f'href="{p}"' not in nav for p in PAGES)
    for path in (*PAGES, "/lots/LOTA"):
        r = tool.get(path)
        assert r.status_code == 403 and "role &#39;uploader&#39; may not" in r.text, path
    for role in ("engineer", "supervisor", "admin"):
        c = page_client(db)
        sign_in(c, k[role])
        nav = NAV.search(c.get("/board").text).group(1)
        assert all(f'href="{p}"' in nav for p in PAGES), role
        for path in (*PAGES, "/lots/LOTA"):
            assert c.get(path).status_code == 200, (role, path)


def test_the_first_product_is_the_default_and_another_can_be_chosen(db):
    k = _line(db)
    c = page_client(db)
    sign_in(c, k["engineer"])
    for path in PAGES:
        text = c.get(path).text
        assert '<option value="AAA" selected>' in text, path  # first by code, no data yet
        chosen = c.get(f"{path}?product=TESTPROD").text
        assert '<option value="TESTPROD" selected>' in chosen, path
    assert "No measured panel of AAA" in c.get("/lots").text
    assert "at least two panels" in c.get("/analysis/shares").text
    text = c.get("/lots?product=TESTPROD").text
    assert re.findall(r'<tr data-lot="([^"]+)"', text) == ["LOTA", "LOTB"]


def test_lot_summary_lists_its_panels_by_level_with_the_histogram(db):
    k = _line(db)
    c = page_client(db)
    sign_in(c, k["supervisor"])
    text = c.get("/lots/LOTA").text
    assert sorted(re.findall(r'<tr data-panel="([^"]+)"', text)) == ["P0001", "P0002"]
    assert "P0003" not in text
    counts = [int(n) for n in re.findall(r'class="bin"[^>]*data-count="(\d+)"', text)]
    assert sum(counts) == 2
    assert text.count('class="limit-line"') == 1 and "FTB limit 60 µm" in text
    # The board and the panels list link each lot cell to its summary.
    assert 'href="/lots/LOTB"' in c.get("/panels?lot=LOTB").text
    assert c.get("/lots/NOSUCHLOT").status_code == 404


def test_fingerprint_page_draws_the_chosen_tool_side_and_layer(db):
    k = _line(db)
    c = page_client(db)
    sign_in(c, k["engineer"])
    text = c.get("/analysis/fingerprints?product=TESTPROD&exposure_tool=EXP-T2&side=B&layer=1").text
    assert "Terms of EXP-T2, side B, layer 1" in text
    arrows = re.search(r'id="fingerprint-mean".*?<g class="arrows"[^>]*>(.*?)</g>', text, re.S)
    assert arrows and arrows.group(1).count("<line ") == 25  # the product's 5 x 5 check points
    assert 'data-term="Kx"' not in text  # a six-term product fits no trapezoid
    mismatch = c.get("/analysis/fingerprints?product=TESTPROD&exposure_tool=EXP-T2&side=A").text
    assert "EXP-T2 made no run of side A" in mismatch


@pytest.mark.parametrize("path, status, words", [
    ("/analysis/fingerprints?product=NOPE", 404, "unknown product"),
    ("/analysis/fingerprints?product=TESTPROD&exposure_tool=NOPE", 404,
     "exposure tool &#39;NOPE&#39; made no"),
    ("/analysis/fingerprints?product=TESTPROD&side=C", 422, "side must be A or B"),
    ("/analysis/fingerprints?product=TESTPROD&layer=13", 422, "layer must be a number from 1"),
    ("/analysis/fingerprints?product=TESTPROD&layer=x", 422, "layer must be a number"),
    ("/analysis/fingerprints?product=TESTPROD&layer=%C2%B2", 422, "layer must be a number"),
    ("/analysis/drift?term=Zz", 422, "term must be one of"),
    ("/analysis/drift?side=AB", 422, "side must be A or B"),
    ("/analysis/alarms?product=a%00", 422, "NUL"),
    ("/lots?product=NOPE", 404, "unknown product"),
])
def test_bad_choices_are_refused_with_a_page_that_says_why(db, path, status, words):
    k = _line(db)
    c = page_client(db)
    sign_in(c, k["engineer"])
    r = c.get(path)
    assert r.status_code == status and words in r.text, (r.status_code, r.text[:400])


def test_pages_say_so_when_there_is_no_product(db):
    k = make_keys(db)
    c = page_client(db)
    sign_in(c, k["engineer"])
    for path in PAGES:
        r = c.get(path)
        assert r.status_code == 200 and "No product is registered yet" in r.text, path


def test_drift_page_offers_every_tool_and_draws_the_chosen_chart(db):
    k = _line(db)
    c = page_client(db)
    sign_in(c, k["engineer"])
    text = c.get("/analysis/drift?product=TESTPROD").text
    tools = re.search(r'<select id="f-tool".*?</select>', text, re.S).group(0)
    assert 'value="EXP-T1"' in tools and 'value="EXP-T2"' in tools  # every tool, alarmed or not
    chosen = c.get("/analysis/drift?product=TESTPROD&exposure_tool=EXP-T1&side=A&term=Tx").text
    assert chosen.count('class="chart ewma"') == 1 and 'id="ewma-exp-t1-a-tx"' in chosen
    # Three panels in two lots: one subgroup point per lot.
    assert chosen.count('class="ewma-point') == 2
    assert c.get("/analysis/drift?product=TESTPROD&exposure_tool=EXP-T2&side=A").text.count(
        'class="chart ewma"') == 0
