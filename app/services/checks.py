"""The one catalogue of checks a measurement must pass before anything is stored.

Every measurement goes through ``problems(batch, panels)`` whether it came alone in a POST or
by the thousand in a CSV file: one function per check, one message per check, and the batch's
locator says where (a JSON pointer, or a file line and column). What the readers already refuse
(a body that is not JSON or does not have the fields and types of ``MeasurementCreate``; a CSV
cell that is not a number) is theirs and is not checked again here.

Problems come back in the order of the input (measurement, then site), at most
``MAX_REPORTED``; a measurement whose panel is unknown or scrapped is not checked further, so
that one cause does not read as many.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator, Mapping
from dataclasses import dataclass
from typing import Final

import numpy as np

from app.config import get_settings
from app.errors import FieldError
from app.schemas import codes
from app.schemas.text import control_problem
from app.services.batch import GENEALOGY, MeasurementBatch
from app.services.lifecycle import PanelStatus
from app.store.tables import Product

FRAMES: Final = tuple(codes.codes(codes.FRAMES))

MAX_REPORTED: Final = 200
TEXT_MAX: Final = 64


@dataclass(frozen=True)
class PanelFacts:
    """What the checks need to know of a registered panel."""

    status: str
    product: Product
    risk: str | None = None  # the panel's stored level


@dataclass(frozen=True)
class Problem:
    measurement: int
    site: int | None
    field: str
    message: str


Check = Callable[[MeasurementBatch, list["PanelFacts | None"], np.ndarray], Iterator[Problem]]


# ------------------------------------------------------------------ checks of the measurement

def _panel(batch: MeasurementBatch, facts: list[PanelFacts | None],
           usable: np.ndarray) -> Iterator[Problem]:
    for i, f in enumerate(facts):
        if (problem := control_problem(batch.panel[i])) is not None:
            usable[i] = False
            yield Problem(i, None, "panel", f"panel {problem}")
        elif f is None:
            usable[i] = False
            yield Problem(i, None, "panel", f"panel '{batch.panel[i]}' is not registered; "
                          "register it first with POST /api/v1/panels")
        elif f.status == PanelStatus.SCRAPPED:
            usable[i] = False
            yield Problem(i, None, "panel", f"panel '{batch.panel[i]}' is scrapped; no further "
                          "measurements are accepted for it")


def _text_problem(name: str, value: str | None, required: bool) -> str | None:
    if value is None or value == "":
        return f"{name} is required (1 to {TEXT_MAX} characters)" if required else None
    if (problem := control_problem(value)) is not None:
        return f"{name} {problem}"
    if len(value) > TEXT_MAX:
        return f"{name} must be 1 to {TEXT_MAX} characters, got {len(value)}"
    return None


def _fields(batch: MeasurementBatch, facts: list[PanelFacts | None],
            usable: np.ndarray) -> Iterator[Problem]:
    times = batch.times
    optional = [(name, batch.genealogy[name]) for name in GENEALOGY if name in batch.genealogy]
    for i in np.flatnonzero(usable).tolist():
        product = facts[i].product  # type: ignore[union-attr]
        layer = int(batch.layer[i])
        if not 1 <= layer <= product.layers_per_side:
            yield Problem(i, None, "layer", f"layer must be 1..{product.layers_per_side} for "
                          f"product '{product.code}', got {layer}")
        if batch.side[i] not in ("A", "B"):
            yield Problem(i, None, "side", f"side must be 'A' or 'B', got '{batch.side[i]}'")
        if batch.frame[i] not in FRAMES:
            yield Problem(i, None, "frame",
                          f"frame must be 'facing_side' or 'panel', got '{batch.frame[i]}'")
        if times[i] is None:
            yield Problem(i, None, "measured_at", f"'{batch.measured_at[i]}' is not an ISO 8601 "
                          "time with a time zone (for example 2026-11-02T06:00:00Z)")
        if (message := _text_problem("exposure_tool", batch.exposure_tool[i], True)) is not None:
            yield Problem(i, None, "exposure_tool", message)
        for name, values in optional:
            if (message := _text_problem(name, values[i], False)) is not None:
                yield Problem(i, None, name, message)


def _site_count(batch: MeasurementBatch, facts: list[PanelFacts | None],
                usable: np.ndarray) -> Iterator[Problem]:
    most = get_settings().max_sites_per_measurement
    for i in np.flatnonzero(usable):
        n = int(batch.counts[i])
        if n == 0:
            usable[i] = False
            yield Problem(i, None, "sites", "a measurement needs at least one site")
        elif n > most:
            usable[i] = False
            yield Problem(i, None, "sites", f"{n} sites in one measurement; at most {most} are "
                          "accepted")


# ------------------------------------------------------------------------ checks of the sites

def _site_rows(batch: MeasurementBatch, usable: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Site rows of usable measurements: (row mask, each row's index within its measurement)."""
    owner = batch.site_owner()
    return usable[owner], np.arange(len(owner)) - batch.starts[owner]


def _finite(batch: MeasurementBatch, facts: list[PanelFacts | None],
            usable: np.ndarray) -> Iterator[Problem]:
    rows, seq = _site_rows(batch, usable)
    owner = batch.site_owner()
    bad_any = np.zeros(len(owner), dtype=bool)
    for name, values in zip(("x_mm", "y_mm", "dx_um", "dy_um"),
                            (batch.x, batch.y, batch.dx, batch.dy), strict=True):
        bad = rows & ~np.isfinite(values)
        bad_any |= bad
        for r in np.flatnonzero(bad):
            yield Problem(int(owner[r]), int(seq[r]), name,
                          f"must be a finite number, got {values[r]}")
    usable[np.unique(owner[bad_any])] = False


def _displacement(batch: MeasurementBatch, facts: list[PanelFacts | None],
                  usable: np.ndarray) -> Iterator[Problem]:
    rows, seq = _site_rows(batch, usable)
    owner = batch.site_owner()
    limit = get_settings().max_abs_displacement_um
    length = np.hypot(batch.dx, batch.dy)
    for r in np.flatnonzero(rows & (length > limit)):
        yield Problem(int(owner[r]), int(seq[r]), "dx_um",
                      f"displacement of {length[r]:.1f} um is over {limit:.0f} um (1 mm): a "
                      "metrology or unit error, not overlay")


def _on_panel(batch: MeasurementBatch, facts: list[PanelFacts | None],
              usable: np.ndarray) -> Iterator[Problem]:
    rows, seq = _site_rows(batch, usable)
    owner = batch.site_owner()
    size = np.array([(f.product.panel_width_mm, f.product.panel_height_mm) if f else (0, 0)
                     for f in facts], dtype=np.float64).reshape(-1, 2)
    half = size[owner] / 2
    outside = rows & ((np.abs(batch.x) > half[:, 0]) | (np.abs(batch.y) > half[:, 1]))
    for r in np.flatnonzero(outside):
        w, h = size[owner[r]]
        yield Problem(int(owner[r]), int(seq[r]), "x_mm",
                      f"site ({batch.x[r]}, {batch.y[r]}) mm lies outside the {w:g} x {h:g} mm "
                      "panel (coordinates are about the panel centre)")


def _duplicates(batch: MeasurementBatch, facts: list[PanelFacts | None],
                usable: np.ndarray) -> Iterator[Problem]:
    rows, seq = _site_rows(batch, usable)
    owner = batch.site_owner()
    order = np.lexsort((batch.y, batch.x, owner))
    same = ((owner[order][1:] == owner[order][:-1]) & (batch.x[order][1:] == batch.x[order][:-1])
            & (batch.y[order][1:] == batch.y[order][:-1]))
    for r in np.sort(order[1:][same]):
        if rows[r]:
            yield Problem(int(owner[r]), int(seq[r]), "x_mm",
                          f"site ({batch.x[r]}, {batch.y[r]}) mm appears more than once in the "
                          "measurement")


#: In order: a failed check may mark a measurement unusable for the checks after it.
CATALOGUE: Final[tuple[Check, ...]] = (
    _panel, _fields, _site_count, _finite, _displacement, _on_panel, _duplicates,
)


def problems(batch: MeasurementBatch, panels: Mapping[str, PanelFacts | None],
             usable: np.ndarray | None = None) -> list[FieldError]:
    """Every problem with the batch, located and in input order (at most MAX_REPORTED).

    ``usable`` (optional) marks measurements a reader already refused, so nothing derived from
    that refusal is reported again.
    """
    facts = [panels.get(p) for p in batch.panel]
    usable = np.ones(len(batch), dtype=bool) if usable is None else usable.copy()
    found: list[Problem] = []
    for check in CATALOGUE:
        found.extend(check(batch, facts, usable))
    found.sort(key=lambda p: (p.measurement, -1 if p.site is None else p.site))
    return [batch.locator.where(p.measurement, p.site, p.field, p.message)
            for p in found[:MAX_REPORTED]]
