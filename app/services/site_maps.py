"""The sites of a panel's measurements in force, with each site's residual: the measured
vector minus the layer's fitted model at the site (``app.overlay.model.evaluate``)."""

from __future__ import annotations

from app.db import Database
from app.overlay.model import evaluate
from app.schemas.sites import LayerSitesRead, PanelSitesRead, SiteVector
from app.services import panel_estimate
from app.services.panels import get_or_raise
from app.store import sitepack
from app.store.tables import SiteSet


def panel_sites(*, db: Database, serial: str, side: str | None = None,
                layer: int | None = None) -> PanelSitesRead:
    """Measured and residual site vectors (panel frame) per side and layer in force."""
    with db.reading() as session:
        get_or_raise(session, serial)
        layers = panel_estimate.current_layers(session, serial)
        chosen = [(s, k, cl) for s in ("A", "B") for k, cl in sorted(layers[s].items())
                  if (side is None or s == side) and (layer is None or k == layer)]
        out = []
        for s, k, cl in chosen:
            pack = session.get_one(SiteSet, (serial, cl.measurement_id))
            xy = sitepack.unpack(pack.panel_frame)
            model_dx, model_dy = evaluate(cl.terms, xy[:, 0], xy[:, 1])
            out.append(LayerSitesRead(
                side=s,
                layer=k, measurement_id=str(cl.measurement_id), exposure_tool=cl.exposure_tool,
                measured_at=cl.measured_at,
                sites=[SiteVector(x_mm=x, y_mm=y, dx_um=dx, dy_um=dy, residual_dx_um=dx - mx,
                                  residual_dy_um=dy - my)
                       for (x, y, dx, dy), mx, my in zip(xy.tolist(), model_dx.tolist(),
                                                         model_dy.tolist(), strict=True)],
            ))
        return PanelSitesRead(serial=serial, layers=out)
