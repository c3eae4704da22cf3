"""The simulated line run straight through the numeric core (no store, no HTTP).

For quick looks while working on the model and for the seeded test in tests/overlay: the same
staggered lots as ``calibration.py``, but the observed terms are the true terms plus fit noise
(the least-squares sd of a ``grid`` x ``grid`` fit of ``site_noise_um`` per axis) instead of
fitted site data, and the history is learned by ``layer_history.learn_history`` directly from the
complete panels before each time step (the service does the same from the store). The risk
level uses ``risk.assess`` with the product defaults and the previous level.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from line_sim import Line, Lot

from app.overlay.forecast import Forecast, forecast_final
from app.overlay.layer_history import learn_history, limit_variance
from app.overlay.model import design_matrix
from app.overlay.risk import RiskThresholds, assess


@dataclass
class CoreRun:
    lots: list[Lot] = field(default_factory=list)
    p: dict[str, np.ndarray] = field(default_factory=dict)
    level: dict[str, list[str]] = field(default_factory=dict)
    after3: dict[str, Forecast] = field(default_factory=dict)


def _fit_sd(line: Line) -> np.ndarray:
    """Per-term sd of an ordinary least-squares fit of the line's site grid (6 terms)."""
    gx, gy = line.sites
    a = design_matrix(gx, gy)[:, :6]
    cov = np.linalg.inv(a.T @ a) * line.config.site_noise_um**2
    sd = np.zeros(8)
    sd[:6] = np.sqrt(np.diag(cov))
    return sd


def run_core(line: Line, *, lots: int, score_from: int = 0, window: int = 200,
             n_max: int = 4000) -> CoreRun:
    """Run ``lots`` staggered lots; panels of lots from ``score_from`` on are recorded."""
    c = line.config
    out = CoreRun()
    fit_sd = _fit_sd(line)
    rng = np.random.default_rng(7)
    observed: dict[str, np.ndarray] = {}
    limit_var = limit_variance(c.l2l_limit_um, 0.5 * math.hypot(c.panel_width_mm,
                                                                c.panel_height_mm),
                               trapezoid=False)
    thresholds = RiskThresholds(ftb_limit_um=c.ftb_limit_um, l2l_limit_um=c.l2l_limit_um)
    for step in range(lots + c.layers):
        if step < lots:
            lot = line.new_lot(f"C{step:03d}", step, prefix="K")
            out.lots.append(lot)
            noisy = lot.terms + rng.normal(0.0, 1.0, lot.terms.shape) * fit_sd
            for i, serial in enumerate(lot.serials):
                observed[serial] = noisy[i]
        # History as the service learns it: the last ``window`` complete panels and as many in
        # process, with the layers they have before this step's measurements.
        started = [lot for lot in out.lots if lot.start_step < step]
        done = [lot for lot in started if step - lot.start_step >= c.layers]
        busy = [lot for lot in started if step - lot.start_step < c.layers]
        keep = window // c.lot_size
        recent = done[-keep:] + busy[-keep:]
        ids, terms, present, tools = [], [], [], []
        for lot in recent:
            measured = min(step - lot.start_step, c.layers)
            for serial in lot.serials:
                ids.append(serial)
                terms.append(observed[serial])
                have = np.zeros((2, c.layers), dtype=bool)
                have[:, :measured] = True
                present.append(have)
                tools.append(lot.tools.T)
        history = learn_history(
            np.array(terms).reshape(-1, 2, c.layers, 8), np.array(present).reshape(-1, 2, c.layers),
            np.array(tools).reshape(-1, 2, c.layers), tuple(line.tool_names),
            panel_ids=tuple(ids), flip_axis=c.flip_axis, limit_var=limit_var,
        )
        for lot in out.lots:
            k = step - lot.start_step + 1
            if not 1 <= k <= c.layers or lot.start_step < score_from:
                continue
            for i, serial in enumerate(lot.serials):
                obs_a = {j: observed[serial][0, j - 1] for j in range(1, k + 1)}
                obs_b = {j: observed[serial][1, j - 1] for j in range(1, k + 1)}
                names = {j: line.tool_names[int(lot.tools[j - 1, 0])] for j in range(1, k + 1)}
                names_b = {j: line.tool_names[int(lot.tools[j - 1, 1])] for j in range(1, k + 1)}
                previous = out.level.get(serial, [None])[-1]
                f = forecast_final(
                    observed_a=obs_a, observed_b=obs_b, history=history,
                    points_mm=line.points, ftb_limit_um=c.ftb_limit_um, tools_a=names,
                    tools_b=names_b, panel_id=serial, seed=i + 100 * step, n_max=n_max,
                    decide_at=thresholds.decision_points(),
                )
                level = assess(ftb_worst_um=0.0, ftb_worst_at_mm=None, l2l_worst_a_um={},
                               l2l_worst_b_um={}, forecast=f, thresholds=thresholds,
                               previous_level=previous).level
                out.p.setdefault(serial, np.full(c.layers, np.nan))[k - 1] = f.p_exceed
                out.level.setdefault(serial, []).append(level)
                if k == 3:
                    out.after3[serial] = f
    return out
