"""Factories that build test data through the services, each test its own."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta
from typing import Any

import numpy as np
from fastapi.testclient import TestClient

from app.db import Database
from app.main import create_app
from app.overlay.model import evaluate
from app.schemas.panels import PanelCreate
from app.schemas.products import ProductCreate
from app.services import keys, panels, products

T0 = datetime(2026, 11, 2, 6, 0, tzinfo=UTC)


def product_data(**overrides: Any) -> dict[str, Any]:
    data: dict[str, Any] = {
        "code": "TESTPROD", "layers_per_side": 12, "flip_axis": "y",
        "panel_width_mm": 510.0, "panel_height_mm": 515.0, "ftb_limit_um": 60.0,
        "l2l_limit_um": 12.0, "model_terms": 6,
    }
    data.update(overrides)
    return data


def make_product(db: Database, **overrides: Any) -> str:
    return products.create(db=db, data=ProductCreate(**product_data(**overrides)),
                           actor="test")[1].code


def make_panel(db: Database, serial: str = "P0001", product: str = "TESTPROD",
               lot: str = "LOT1") -> str:
    panels.create(db=db, data=PanelCreate(serial=serial, product=product, lot=lot), actor="test")
    return serial


def grid(n: int = 5, half_w: float = 229.5, half_h: float = 231.75) -> np.ndarray:
    xs = np.linspace(-half_w, half_w, n)
    ys = np.linspace(-half_h, half_h, n)
    return np.array([(x, y) for y in ys for x in xs])


def sites(terms: Any, *, n: int = 5, noise: float = 0.0, seed: int = 0) -> list[dict[str, float]]:
    """Sites on a grid displaced by ``terms`` (8 raw terms, in the frame being posted)."""
    pts = grid(n)
    dx, dy = evaluate(np.asarray(terms, dtype=float), pts[:, 0], pts[:, 1])
    rng = np.random.default_rng(seed)
    dx = dx + rng.normal(0, noise, len(pts)) if noise else dx
    dy = dy + rng.normal(0, noise, len(pts)) if noise else dy
    return [{"x_mm": float(x), "y_mm": float(y), "dx_um": float(a), "dy_um": float(b)}
            for (x, y), a, b in zip(pts, dx, dy, strict=True)]


def measurement(panel: str, layer: int, side: str, terms: Any = (0,) * 8, *,
                frame: str = "facing_side", tool: str = "EXP-T1", minutes: int = 0,
                **kw: Any) -> dict[str, Any]:
    t = list(terms) + [0.0] * (8 - len(list(terms)))
    return {
        "panel": panel, "layer": layer, "side": side, "frame": frame, "exposure_tool": tool,
        "measured_at": (T0 + timedelta(minutes=minutes or layer * 60 + (30 if side == "B" else 0)))
        .isoformat(),
        "sites": sites(t, **kw),
    }


class Keys(dict[str, str]):
    def headers(self, role: str) -> dict[str, str]:
        return {"Authorization": f"Bearer {self[role]}"}


def make_keys(db: Database) -> Keys:
    return Keys({role: keys.create(db=db, role=role, label=f"test {role}")[0]
                 for role in keys.ROLES})


def client(db: Database) -> TestClient:
    return TestClient(create_app(db), raise_server_exceptions=True)
