"""Exposure-tool fingerprints over a window, and what each tool adds to FTB (a what-if).

Fingerprints: every run of the window in its tool's own frame (side B mirrored back), averaged
per tool, side and (optionally) layer, against the rest of the fleet (``overlay.fingerprints``).

What-if: for the panels with a run in the window, their whole current stacks give the FTB
spread at the worst check point (``overlay.attribution.spread``). For each tool, its bias (its
mean per side in its own frame less the median of all tools' means there, mirrored into the
panel frame for side B) is taken out of every run it made on those panels, and the spread is
computed again. The worst check point may move; each figure is at its own worst point.
"""

from __future__ import annotations

import warnings

import numpy as np

from app.db import Database
from app.errors import InvalidInput
from app.overlay.attribution import panel_ftb_terms, spread
from app.overlay.fingerprints import Fingerprints, fingerprints
from app.overlay.frames import mirror_terms
from app.overlay.model import TERM_NAMES
from app.schemas.analysis import (
    AnalysisFilter,
    FingerprintReport,
    FingerprintRow,
    TermFigure,
    ToolWhatIf,
)
from app.services.analysis_data import (
    ProductInfo,
    Runs,
    both_sides,
    selected_panels,
    stacks,
    whole_panels,
    window_runs,
)


def _figures(mean: np.ndarray, half: np.ndarray) -> list[TermFigure]:
    def number(v: float) -> float | None:
        return float(v) if np.isfinite(v) else None

    return [TermFigure(term=name, mean=number(m), half_width=number(h))
            for name, m, h in zip(TERM_NAMES, mean, half, strict=True)]


def _cells(runs: Runs, by_layer: bool) -> tuple[np.ndarray, list[tuple[str, int | None]]]:
    side = runs.side_b.astype(np.int64)
    if not by_layer:
        return side, [("A", None), ("B", None)]
    labels: list[tuple[str, int | None]]
    top = int(runs.layer.max())
    labels = [(s, layer) for s in ("A", "B") for layer in range(1, top + 1)]
    return side * top + runs.layer - 1, labels


def _rows(runs: Runs, fp: Fingerprints, labels: list[tuple[str, int | None]]
          ) -> list[FingerprintRow]:
    rows = []
    for t, tool in enumerate(runs.tools):
        for c, (side, layer) in enumerate(labels):
            if fp.count[t, c] == 0:
                continue
            rows.append(FingerprintRow(
                exposure_tool=tool, side=side, layer=layer,
                count=int(fp.count[t, c]), rest_count=int(fp.rest_count[t, c]),
                terms_facing_side=_figures(fp.mean[t, c], fp.half_width[t, c]),
                rest_facing_side=_figures(fp.rest_mean[t, c], fp.rest_half_width[t, c]),
                difference_facing_side=_figures(fp.difference[t, c],
                                               fp.difference_half_width[t, c]),
            ))
    return rows


def _what_if(info: ProductInfo, window: Runs, stack: Runs, by_side: Fingerprints
             ) -> tuple[list[ToolWhatIf], tuple[float, float] | None]:
    keep = both_sides(stack)
    stack = stack.subset(keep)
    n_panels = len(stack.panels)
    if n_panels < 2:
        return [], None
    sign = stack.sign
    base = spread(panel_ftb_terms(stack.terms, sign, stack.panel, n_panels),
                  info.check_x, info.check_y)
    # A tool's bias: its mean less the median of the tools' means (per side, own frame), so
    # that one tool that is off does not make the others look off the other way.
    with warnings.catch_warnings():  # a side no tool ran has no reference: nothing to remove
        warnings.simplefilter("ignore", RuntimeWarning)
        reference = np.nanmedian(by_side.mean, axis=0)
    out = []
    tool_names = np.asarray(stack.tools, dtype=object)[stack.tool]
    for t, tool in enumerate(window.tools):
        on_tool = tool_names == tool
        if not on_tool.any():
            continue
        terms = stack.terms.copy()
        for c, side in enumerate(("A", "B")):
            bias = np.nan_to_num(by_side.mean[t, c] - reference[c])
            rows = on_tool & (stack.side_b == (side == "B"))
            terms[rows] -= mirror_terms(bias, side=side, flip_axis=info.flip_axis)
        without = spread(panel_ftb_terms(terms, sign, stack.panel, n_panels),
                         info.check_x, info.check_y)
        out.append(ToolWhatIf(
            exposure_tool=tool, runs=int(on_tool.sum()), ftb_3sigma_with_um=base.worst_figure,
            ftb_3sigma_without_um=without.worst_figure,
            adds_um=base.worst_figure - without.worst_figure,
        ))
    out.sort(key=lambda w: w.adds_um, reverse=True)
    point = (float(info.check_x[base.worst]), float(info.check_y[base.worst]))
    return out, point


def tool_fingerprints(*, db: Database, filters: AnalysisFilter, by_layer: bool = True,
                      confidence: float = 0.95) -> FingerprintReport:
    """Mean terms per tool, side (and layer) in the tool's own frame, against the fleet."""
    if not 0.5 <= confidence < 1.0:
        raise InvalidInput(f"confidence must be in [0.5, 1), got {confidence}")
    with db.reading() as session:
        info, runs = window_runs(session, filters)
        serials = selected_panels(runs)
        stack = stacks(session, info, serials) if runs.size and not whole_panels(filters) \
            else runs
    if runs.size == 0:
        return FingerprintReport(product=info.code, confidence=confidence, panels=0, rows=[],
                                 what_if=[], worst_point_mm=None)
    own = runs.tool_frame(info.flip_axis)
    n_tools = len(runs.tools)
    cell, labels = _cells(runs, by_layer)
    fp = fingerprints(own, runs.tool, cell, n_tools=n_tools, n_cells=len(labels),
                      confidence=confidence)
    side_cell = runs.side_b.astype(np.int64)
    by_side = fp if not by_layer else fingerprints(own, runs.tool, side_cell, n_tools=n_tools,
                                                   n_cells=2, confidence=confidence)
    what_if, point = _what_if(info, runs, stack, by_side)
    return FingerprintReport(product=info.code, confidence=confidence, panels=len(serials),
                             rows=_rows(runs, fp, labels), what_if=what_if,
                             worst_point_mm=point)
