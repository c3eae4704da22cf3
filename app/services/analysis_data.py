"""What the FTB analysis reads from the store: layer runs (a measurement in force and its fit)
of one product, as numpy arrays, by indexed queries.

A window selects runs by ``measured_at`` (index ``ix_measurements_time``); panels are tied to
the product through ``panels.product_id``. Stacks (every layer of the selected panels, whenever
it ran) are read by panel, through the ``ix_measurements_current`` index. Nothing here reads the
sites table except ``site_rows`` for one panel, layer and side.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from datetime import UTC, datetime
from typing import Any

import numpy as np
from sqlalchemy import Float, Select, select
from sqlalchemy.ext.compiler import compiles
from sqlalchemy.orm import Session
from sqlalchemy.sql.functions import FunctionElement

from app.errors import FieldError, InvalidInput, NotFound
from app.overlay.frames import mirror_terms
from app.schemas.analysis import AnalysisFilter
from app.services.products import check_points
from app.store.tables import Fit, Lot, Measurement, Panel, Product


class epoch_seconds(FunctionElement[float]):
    """A stored timestamp as seconds since 1970-01-01 UTC, computed by the database (reading
    hundreds of thousands of timestamps as Python datetimes costs more than the analysis)."""

    type = Float()
    inherit_cache = True


@compiles(epoch_seconds, "sqlite")
def _epoch_sqlite(element: epoch_seconds, compiler: Any, **kw: Any) -> str:
    # Stored as naive UTC text (tables.UtcDateTime); 2440587.5 is the Julian day of the epoch.
    return f"((julianday({compiler.process(element.clauses, **kw)}) - 2440587.5) * 86400.0)"


@compiles(epoch_seconds, "postgresql")
def _epoch_postgresql(element: epoch_seconds, compiler: Any, **kw: Any) -> str:
    return f"EXTRACT(EPOCH FROM {compiler.process(element.clauses, **kw)})"


_TERMS = (Fit.tx, Fit.ty, Fit.sx, Fit.sy, Fit.ox, Fit.oy, Fit.kx, Fit.ky)
_COLUMNS = (
    Measurement.panel,
    Lot.code,
    Measurement.side,
    Measurement.layer,
    Measurement.exposure_tool,
    epoch_seconds(Measurement.measured_at),
    *_TERMS,
)
_BATCH = 500


@dataclass(frozen=True)
class ProductInfo:
    id: int
    code: str
    flip_axis: str
    ftb_limit_um: float
    check_x: np.ndarray
    check_y: np.ndarray


@dataclass(frozen=True)
class Runs:
    """Layer runs, one entry per measurement in force. Codes index the label tuples."""

    panel: np.ndarray  # int codes into panels
    lot: np.ndarray
    tool: np.ndarray
    side_b: np.ndarray  # bool
    layer: np.ndarray  # int
    seconds: np.ndarray  # measured_at, seconds since the epoch (UTC)
    terms: np.ndarray  # (n, 8), panel frame
    panels: tuple[str, ...]
    lots: tuple[str, ...]
    tools: tuple[str, ...]

    @property
    def size(self) -> int:
        return int(self.layer.size)

    @property
    def sign(self) -> np.ndarray:
        """+1 on side A, -1 on side B: how a run enters FTB = P_A - P_B."""
        return np.where(self.side_b, -1.0, 1.0)

    def tool_frame(self, flip_axis: str) -> np.ndarray:
        """Terms in each tool's own frame: side B mirrored back (frames.mirror_terms)."""
        out = self.terms.copy()
        out[self.side_b] = mirror_terms(self.terms[self.side_b], side="B", flip_axis=flip_axis)
        return out

    def subset(self, keep: np.ndarray) -> Runs:
        """The runs where ``keep`` holds, with labels re-coded to those still present."""

        def recode(codes: np.ndarray, labels: tuple[str, ...]) -> tuple[np.ndarray,
                                                                       tuple[str, ...]]:
            present, inverse = np.unique(codes[keep], return_inverse=True)
            return inverse.astype(np.int64), tuple(labels[i] for i in present)

        panel, panels = recode(self.panel, self.panels)
        lot, lots = recode(self.lot, self.lots)
        tool, tools = recode(self.tool, self.tools)
        return Runs(panel, lot, tool, self.side_b[keep], self.layer[keep], self.seconds[keep],
                    self.terms[keep], panels, lots, tools)


def product_info(session: Session, code: str) -> ProductInfo:
    product = session.scalars(select(Product).where(Product.code == code)).one_or_none()
    if product is None:
        raise NotFound(f"unknown product '{code}'", [FieldError("unknown product",
                                                                column="product")])
    points = check_points(product)
    return ProductInfo(product.id, product.code, product.flip_axis, product.ftb_limit_um,
                       points[:, 0], points[:, 1])


def check_window(f: AnalysisFilter) -> None:
    if f.start is not None and f.end is not None and f.start >= f.end:
        raise InvalidInput("the window is empty: 'from' must be before 'to'",
                           [FieldError("from must be before to", column="from")])
    for name, value in (("from", f.start), ("to", f.end)):
        if value is not None and value.tzinfo is None:
            raise InvalidInput(f"'{name}' must carry a time zone, e.g. 2026-11-02T00:00Z",
                               [FieldError("time zone missing", column=name)])


def _runs_query(product_id: int, *, window: bool = False) -> Select[Any]:
    """Runs in force of one product. With ``window`` the product is matched as an expression
    (product_id + 0), which no index serves, so that the planner reads the window off the time
    index: without table statistics SQLite would otherwise walk every panel of the product, the
    whole store, to find one week."""
    product = (Panel.product_id + 0) if window else Panel.product_id
    query = (
        select(*_COLUMNS)
        .join(Fit, (Fit.panel == Measurement.panel) & (Fit.measurement_id == Measurement.id))
        .join(Panel, Panel.serial == Measurement.panel)
        .join(Lot, Lot.id == Panel.lot_id)
        .where(product == product_id, Measurement.superseded_by.is_(None))
    )
    return query  # type: ignore[return-value]


def _filtered(query: Select[Any], f: AnalysisFilter) -> Select[Any]:
    if f.start is not None:
        query = query.where(Measurement.measured_at >= f.start)
    if f.end is not None:
        query = query.where(Measurement.measured_at < f.end)
    if f.exposure_tool is not None:
        query = query.where(Measurement.exposure_tool == f.exposure_tool)
    if f.side is not None:
        query = query.where(Measurement.side == f.side)
    if f.layer is not None:
        query = query.where(Measurement.layer == f.layer)
    if f.lot is not None:
        query = query.where(Lot.code == f.lot)
    return query


def _to_runs(rows: Sequence[Any]) -> Runs:
    def codes(values: Sequence[Any]) -> tuple[np.ndarray, tuple[str, ...]]:
        labels, inverse = np.unique(np.asarray(values, dtype=str), return_inverse=True)
        return inverse.astype(np.int64), tuple(str(v) for v in labels)

    if not rows:
        empty = np.zeros(0, dtype=np.int64)
        return Runs(empty, empty, empty, empty.astype(bool), empty, empty.astype(float),
                    np.zeros((0, 8)), (), (), ())
    columns = list(zip(*rows, strict=True))  # one transpose instead of a pass per field
    panel, panels = codes(columns[0])
    lot, lots = codes(columns[1])
    tool, tools = codes(columns[4])
    return Runs(
        panel=panel, lot=lot, tool=tool,
        side_b=np.asarray(columns[2], dtype=object) == "B",
        layer=np.asarray(columns[3], dtype=np.int64),
        seconds=np.asarray(columns[5], dtype=np.float64),
        terms=np.array(columns[6:14], dtype=np.float64).T.copy(),
        panels=panels, lots=lots, tools=tools,
    )


def window_runs(session: Session, f: AnalysisFilter) -> tuple[ProductInfo, Runs]:
    """The runs of the filter's product measured in its window, narrowed by its other fields."""
    check_window(f)
    info = product_info(session, f.product)
    # Through the connection: plain rows, without the ORM's per-row bookkeeping.
    window = f.start is not None or f.end is not None
    query = _filtered(_runs_query(info.id, window=window), f)
    rows = session.connection().execute(query).all()
    return info, _to_runs(rows)


def whole_panels(f: AnalysisFilter) -> bool:
    """The filter keeps every run of the panels it selects (no window, tool, side or layer), so
    their stacks are the runs already read."""
    return f.start is None and f.end is None and f.exposure_tool is None and f.side is None \
        and f.layer is None


def stacks(session: Session, info: ProductInfo, serials: Sequence[str]) -> Runs:
    """Every run in force of the given panels, whenever measured (their whole current stack)."""
    rows: list[Any] = []
    serials = sorted(serials)
    for start in range(0, len(serials), _BATCH):
        rows += session.connection().execute(
            _runs_query(info.id).where(Measurement.panel.in_(serials[start:start + _BATCH]))
        ).all()
    return _to_runs(rows)


def selected_panels(runs: Runs) -> list[str]:
    """Serials of the panels that have at least one run in ``runs``."""
    return [runs.panels[i] for i in np.unique(runs.panel)]


def both_sides(runs: Runs) -> np.ndarray:
    """Mask of runs whose panel has at least one layer on each side (it has an FTB)."""
    n = len(runs.panels)
    has_a = np.bincount(runs.panel[~runs.side_b], minlength=n) > 0
    has_b = np.bincount(runs.panel[runs.side_b], minlength=n) > 0
    return np.asarray((has_a & has_b)[runs.panel])


def as_utc(seconds: float) -> datetime:
    """Seconds since the epoch as a UTC time, to the second (the database's julian-day
    arithmetic carries microsecond noise)."""
    return datetime.fromtimestamp(round(seconds), tz=UTC)
