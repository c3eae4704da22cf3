"""The layer table's tool frame: side B's terms as its exposure tool saw them."""

from __future__ import annotations

import numpy as np
import pytest

from app.services import panels
from app.views.layers import layer_rows
from tests.factories import client, make_keys, make_panel, make_product, measurement


@pytest.mark.parametrize("flip", ["x", "y"])
def test_tool_frame_row_gives_back_the_terms_the_tool_posted(db, flip):
    make_product(db, flip_axis=flip)
    make_panel(db)
    k = make_keys(db)
    c = client(db)
    posted = (4.0, -3.0, 0.005, -0.002, 0.003, 0.001)  # tool frame, um and um/mm
    for side in ("A", "B"):
        assert c.post("/api/v1/measurements", json=measurement("P0001", 1, side, posted),
                      headers=k.headers("uploader")).status_code == 201
    rows = layer_rows(panels.stack(db=db, serial="P0001").layers, flip_axis=flip)
    # The posted sites are exact (no noise), so the fit in the tool frame is the posted terms
    # (docs/conventions.md, reported units: 1 um/mm = 1000 ppm = 1000 urad).
    want = (posted[0], posted[1], posted[2] * 1000, posted[3] * 1000,
            (posted[4] + posted[5]) / 2 * 1000, (posted[5] - posted[4]) * 1000)
    for row in rows:
        t = row.tool
        got = (t.tx_um, t.ty_um, t.sx_ppm, t.sy_ppm, t.rotation_urad, t.nonorthogonality_urad)
        np.testing.assert_allclose(got, want, atol=1e-6)
    side_b = next(r for r in rows if r.layer.side == "B")
    # In the panel frame side B differs: rotation always changes sign under a mirror.
    assert side_b.panel.rotation_urad == pytest.approx(-want[4])
