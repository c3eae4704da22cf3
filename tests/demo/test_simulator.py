"""The seeded demo scenario: deterministic, in the agreed format, and telling its story."""

from __future__ import annotations

import csv
import json
from collections import defaultdict
from pathlib import Path

import numpy as np
import pytest

from app.demo import simulator
from app.demo.simulator import ScenarioSummary, generate
from app.overlay.frames import mirror_sites
from app.schemas.products import ProductCreate

FILES = ("products.json", "panels.csv", "measurements.csv", "README.md")
COMMITTED = Path(__file__).resolve().parents[2] / "app" / "demo" / "sample_data"
Rows = list[dict[str, str]]


@pytest.fixture(scope="module")
def scenario(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, ScenarioSummary]:
    out_dir = tmp_path_factory.mktemp("scenario")
    return out_dir, generate(out_dir)


@pytest.fixture(scope="module")
def measurements(scenario: tuple[Path, ScenarioSummary]) -> Rows:
    with (scenario[0] / "measurements.csv").open(newline="") as handle:
        return list(csv.DictReader(handle))


@pytest.fixture(scope="module")
def panels(scenario: tuple[Path, ScenarioSummary]) -> Rows:
    with (scenario[0] / "panels.csv").open(newline="") as handle:
        return list(csv.DictReader(handle))


@pytest.fixture(scope="module")
def products(scenario: tuple[Path, ScenarioSummary]) -> list[dict[str, object]]:
    return json.loads((scenario[0] / "products.json").read_text())  # type: ignore[no-any-return]


def _key(row: dict[str, str]) -> tuple[str, str, str]:
    return row["panel"], row["layer"], row["side"]


def _blocks(rows: Rows) -> list[Rows]:
    """Consecutive rows of one panel/layer/side."""
    blocks: list[Rows] = []
    for row in rows:
        if blocks and _key(blocks[-1][0]) == _key(row):
            blocks[-1].append(row)
        else:
            blocks.append([row])
    return blocks


def test_same_seed_gives_identical_bytes(
    scenario: tuple[Path, ScenarioSummary], tmp_path: Path
) -> None:
    summary = generate(tmp_path)
    assert summary == scenario[1]
    for name in FILES:
        assert (tmp_path / name).read_bytes() == (scenario[0] / name).read_bytes(), name


def test_committed_sample_data_is_fresh(scenario: tuple[Path, ScenarioSummary]) -> None:
    for name in FILES:
        committed = COMMITTED / name
        assert committed.is_file(), f"{committed} missing: run python -m app.demo.simulator"
        assert committed.read_bytes() == (scenario[0] / name).read_bytes(), (
            f"app/demo/sample_data/{name} is stale: run python -m app.demo.simulator"
        )


def test_headers(scenario: tuple[Path, ScenarioSummary]) -> None:
    out_dir = scenario[0]
    first_line = (out_dir / "measurements.csv").read_text().split("\n", 1)[0]
    assert first_line == "panel,layer,side,frame,exposure_tool,measured_at,x_mm,y_mm,dx_um,dy_um"
    assert (out_dir / "panels.csv").read_text().split("\n", 1)[0] == "serial,product,lot"


def test_products(products: list[dict[str, object]]) -> None:
    required = {
        "code", "name", "layers_per_side", "flip_axis", "panel_width_mm", "panel_height_mm",
        "ftb_limit_um", "l2l_limit_um", "model_terms", "p_watch", "p_at_risk",
    }  # fmt: skip
    assert len(products) == 2
    for product in products:
        assert required <= set(product) <= required | {"vias"}
        assert product["layers_per_side"] == 12
        assert (product["panel_width_mm"], product["panel_height_mm"]) == (510, 515)
    assert {p["flip_axis"] for p in products} == {"x", "y"}
    assert {p["model_terms"] for p in products} == {6, 8}
    vias = [p["vias"] for p in products if "vias" in p]
    assert len(vias) == 1  # one product with via settings, one judged by its L2L limit alone
    ProductCreate(**next(p for p in products if "vias" in p))  # valid settings  # type: ignore[arg-type]


def test_counts(scenario: tuple[Path, ScenarioSummary], panels: Rows, measurements: Rows) -> None:
    summary = scenario[1]
    assert 280 <= len(panels) == summary.panels <= 320
    assert len({p["serial"] for p in panels}) == len(panels)
    assert len({p["lot"] for p in panels}) == summary.lots == 8
    assert len({p["product"] for p in panels}) == summary.products == 2
    assert {r["exposure_tool"] for r in measurements} == set(simulator.TOOLS)
    assert len(measurements) == summary.rows < 120_000
    assert {r["frame"] for r in measurements} == {"facing_side", "panel"}


def test_measurements_contiguous_sorted_and_complete(measurements: Rows, panels: Rows) -> None:
    product_of = {p["serial"]: p["product"] for p in panels}
    blocks = _blocks(measurements)
    keys = [_key(b[0]) for b in blocks]
    assert len(keys) == len(set(keys)), "a measurement's rows are split"
    stamps = [b[0]["measured_at"] for b in blocks]
    assert all(s.endswith("+08:00") for s in stamps)
    assert stamps == sorted(stamps) and max(stamps) < "2026-12-01"
    sites_per_product = defaultdict(set)
    reached: dict[tuple[str, str], list[int]] = defaultdict(list)
    for block in blocks:
        assert len({(r["measured_at"], r["exposure_tool"], r["frame"]) for r in block}) == 1
        sites_per_product[product_of[block[0]["panel"]]].add(len(block))
        reached[block[0]["panel"], block[0]["side"]].append(int(block[0]["layer"]))
    assert {p: len(n) for p, n in sites_per_product.items()} == {"C55": 1, "C75": 1}
    for serial in product_of:
        layers_a, layers_b = reached[serial, "A"], reached[serial, "B"]
        assert layers_a == list(range(1, len(layers_a) + 1)), "side A layers out of order"
        assert layers_b == list(range(1, len(layers_b) + 1)), "side B layers out of order"
        assert 2 <= len(layers_a) <= 12 and len(layers_b) in (len(layers_a), len(layers_a) - 1)


def test_side_a_measured_before_side_b(measurements: Rows) -> None:
    when = {_key(b[0]): b[0]["measured_at"] for b in _blocks(measurements)}
    for (serial, layer, side), stamp in when.items():
        if side == "B":
            assert when[serial, layer, "A"] < stamp


def _mean_dx_panel_frame(rows: Rows, flip_axis: str) -> float:
    columns = ("x_mm", "y_mm", "dx_um", "dy_um")
    x, y, dx, dy = (np.array([float(r[c]) for r in rows]) for c in columns)
    if rows[0]["frame"] == "facing_side":
        x, y, dx, dy = mirror_sites(x, y, dx, dy, side=rows[0]["side"], flip_axis=flip_axis)
    return float(dx.mean())


def test_side_b_is_in_its_tool_frame(
    scenario: tuple[Path, ScenarioSummary], measurements: Rows, panels: Rows,
    products: list[dict[str, object]],
) -> None:  # fmt: skip
    # A drifting panel moves +x on side A and -x on side B in the panel frame. On C55 (flip y)
    # side B's tool frame shows +x, so the mirror must be undone to see the drift's sign.
    flip_of = {str(p["code"]): str(p["flip_axis"]) for p in products}
    product_of = {p["serial"]: p["product"] for p in panels}
    drifting_c55 = [s for s in scenario[1].drifting if product_of[s] == "C55"]
    assert drifting_c55 and flip_of["C55"] == "y"
    for serial in drifting_c55:
        rows = [r for r in measurements if r["panel"] == serial]
        side_a = [r for r in rows if r["side"] == "A"]
        side_b = [r for r in rows if r["side"] == "B"]
        assert {r["frame"] for r in side_b} == {"facing_side"}
        assert _mean_dx_panel_frame(side_a, "y") > 1.0
        assert _mean_dx_panel_frame(side_b, "y") < -1.0
        assert np.mean([float(r["dx_um"]) for r in side_b]) > 1.0  # as the tool posted it


def test_one_lot_posts_side_b_in_panel_frame(measurements: Rows) -> None:
    panel_frame = {r["panel"][:8] for r in measurements if r["frame"] == "panel"}
    assert panel_frame == {"L26-4804"}
    assert all(r["side"] == "B" for r in measurements if r["frame"] == "panel")


def test_risky_panels_are_listed_and_distinct(scenario: tuple[Path, ScenarioSummary],
                                               panels: Rows) -> None:  # fmt: skip
    summary = scenario[1]
    serials = {p["serial"] for p in panels}
    kinds = (summary.drifting, summary.slow_drifting, summary.growing_core, summary.over_limit)
    story = [s for kind in kinds for s in kind]
    assert all(kind for kind in (*kinds, summary.biased_tool))
    assert len(story) == len(set(story)) and set(story) <= serials
    assert set(summary.biased_tool) <= serials
    readme = (scenario[0] / "README.md").read_text()
    assert all(s in readme for s in (*story, *summary.biased_tool))


def test_names_are_the_invented_ones(
    scenario: tuple[Path, ScenarioSummary], products: list[dict[str, object]]
) -> None:
    assert scenario[1].fab == simulator.FAB_NAME
    assert f"# Demo scenario: {simulator.FAB_NAME}\n" in (scenario[0] / "README.md").read_text()
    assert [p["name"] for p in products] == [p.name for p in simulator.PRODUCTS]
    assert [p["code"] for p in products] == [p.code for p in simulator.PRODUCTS]
