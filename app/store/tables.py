"""ORM tables of the traceability store (SQLAlchemy 2 typed declarative).

Scale-out rule: every table owned by a panel (measurements, sites, fits, panel states, holds)
carries the panel serial, and every one of its unique keys (primary key included) contains it,
so that the store can be distributed by panel on a distributed PostgreSQL, which requires unique
keys to contain the distribution column. Ids of panel-owned rows are UUIDs made by the
application, so no sequence is shared across shards.

All coordinates and displacements stored here are in the panel frame except the ``posted``
site pack of ``measurement_sites``, which keeps what the tool sent. The running estimate's JSON
columns are typed and versioned (``app.store.stored``).
"""

from __future__ import annotations

import uuid
from datetime import UTC, datetime
from typing import Any, ClassVar

from sqlalchemy import (
    JSON,
    DateTime,
    Float,
    ForeignKey,
    ForeignKeyConstraint,
    Index,
    Integer,
    LargeBinary,
    MetaData,
    String,
    Text,
    TypeDecorator,
    Uuid,
    text,
)
from sqlalchemy.engine import Dialect
from sqlalchemy.orm import DeclarativeBase, Mapped, mapped_column

from app.store.stored import (
    StoredForecast,
    StoredPoints,
    StoredStack,
    Typed,
    points_adapter,
)

NAMING = {
    "ix": "ix_%(table_name)s_%(column_0_N_name)s",
    "uq": "uq_%(table_name)s_%(column_0_N_name)s",
    "ck": "ck_%(table_name)s_%(constraint_name)s",
    "fk": "fk_%(table_name)s_%(column_0_N_name)s_%(referred_table_name)s",
    "pk": "pk_%(table_name)s",
}


def utcnow() -> datetime:
    return datetime.now(UTC)


class Base(DeclarativeBase):
    metadata = MetaData(naming_convention=NAMING)
    type_annotation_map: ClassVar[dict[Any, Any]] = {dict[str, Any]: JSON, list[Any]: JSON}


class UtcDateTime(TypeDecorator[datetime]):
    """An aware timestamp, stored as UTC on every database and read back as aware UTC.

    (SQLite keeps no time zone, so a plain DateTime(timezone=True) would come back naive.)
    """

    impl = DateTime(timezone=True)
    cache_ok = True

    def process_bind_param(self, value: datetime | None, dialect: Dialect) -> datetime | None:
        if value is None:
            return None
        if value.tzinfo is None:
            raise ValueError("timestamps must carry a time zone")
        value = value.astimezone(UTC)
        return value.replace(tzinfo=None) if dialect.name == "sqlite" else value

    def process_result_value(self, value: datetime | None, dialect: Dialect) -> datetime | None:
        if value is None:
            return None
        return value.replace(tzinfo=UTC) if value.tzinfo is None else value.astimezone(UTC)


Stamp = UtcDateTime()


class Product(Base):
    __tablename__ = "products"

    id: Mapped[int] = mapped_column(primary_key=True)
    code: Mapped[str] = mapped_column(String(64), unique=True)
    name: Mapped[str] = mapped_column(String(200), default="")
    layers_per_side: Mapped[int]
    flip_axis: Mapped[str] = mapped_column(String(1))
    panel_width_mm: Mapped[float]
    panel_height_mm: Mapped[float]
    ftb_limit_um: Mapped[float]
    l2l_limit_um: Mapped[float]
    model_terms: Mapped[int]
    check_points_mm: Mapped[list[Any]]
    p_watch: Mapped[float]
    p_at_risk: Mapped[float]
    # Bumped whenever the product's learned history may change (a panel completes its stack,
    # or a measurement of a completed panel is replaced): forecasts cache history by it.
    history_revision: Mapped[int] = mapped_column(Integer, default=0, server_default="0")
    # The cut-off of that revision: the history learns only from what was received by then,
    # so every process learns the same history for the same revision.
    history_at: Mapped[datetime | None] = mapped_column(Stamp)
    #: Via settings (all None: the product has none and L2L is judged by l2l_limit_um alone).
    via_diameter_um: Mapped[float | None]
    pad_diameter_um: Mapped[float | None]
    via_layers: Mapped[list[Any] | None]  # [{"layer", "via_diameter_um", "pad_diameter_um"}]
    copper_thickness_um: Mapped[float | None]
    pad_width_um: Mapped[float | None]
    via_depth_um: Mapped[float | None]
    resistivity_ohm_m: Mapped[float | None]
    # Hysteresis: a watched / at-risk panel leaves the level only below these. The server
    # defaults only filled the rows that existed when the columns came (migration 0007, when
    # p_at_risk defaulted to 0.20); new products take theirs from ProductCreate (0.02, 0.25).
    p_watch_leave: Mapped[float] = mapped_column(Float, server_default=text("0.02"))
    p_at_risk_leave: Mapped[float] = mapped_column(Float, server_default=text("0.1"))
    created_at: Mapped[datetime] = mapped_column(Stamp, default=utcnow)


class Lot(Base):
    __tablename__ = "lots"

    id: Mapped[int] = mapped_column(primary_key=True)
    code: Mapped[str] = mapped_column(String(64), unique=True)
    product_id: Mapped[int] = mapped_column(ForeignKey("products.id"))
    created_at: Mapped[datetime] = mapped_column(Stamp, default=utcnow)


class Panel(Base):
    __tablename__ = "panels"

    serial: Mapped[str] = mapped_column(String(64), primary_key=True)
    product_id: Mapped[int] = mapped_column(ForeignKey("products.id"), index=True)
    lot_id: Mapped[int] = mapped_column(ForeignKey("lots.id"), index=True)
    status: Mapped[str] = mapped_column(String(16), default="in_process")
    # Bumped by every write that changes the panel's measurements; a write prepared outside
    # the lock checks it to know whether what it computed is still current.
    revision: Mapped[int] = mapped_column(Integer, default=0, server_default="0")
    # When every layer of both sides first had a measurement in force.
    completed_at: Mapped[datetime | None] = mapped_column(Stamp)
    created_at: Mapped[datetime] = mapped_column(Stamp, default=utcnow)


class Measurement(Base):
    __tablename__ = "measurements"
    __table_args__ = (Index("ix_measurements_current", "panel", "side", "layer"),)

    panel: Mapped[str] = mapped_column(ForeignKey("panels.serial"), primary_key=True)
    id: Mapped[uuid.UUID] = mapped_column(Uuid, primary_key=True, default=uuid.uuid4)
    layer: Mapped[int]
    side: Mapped[str] = mapped_column(String(1))
    frame: Mapped[str] = mapped_column(String(16))  # "facing_side" or "panel", as posted
    exposure_tool: Mapped[str] = mapped_column(String(64))
    measured_at: Mapped[datetime] = mapped_column(Stamp)
    received_at: Mapped[datetime] = mapped_column(Stamp, default=utcnow)
    n_sites: Mapped[int]
    superseded_by: Mapped[uuid.UUID | None] = mapped_column(Uuid)
    source: Mapped[str] = mapped_column(String(16), default="api")  # "api" or "import"
    key_label: Mapped[str] = mapped_column(String(100), default="")
    # Genealogy a fab may post with each measurement (all optional).
    metrology_tool: Mapped[str | None] = mapped_column(String(64))
    recipe: Mapped[str | None] = mapped_column(String(64))
    artwork: Mapped[str | None] = mapped_column(String(64))
    shift: Mapped[str | None] = mapped_column(String(64))


class SiteSet(Base):
    """The sites of one measurement, packed: one row per measurement, not one per site.

    ``posted`` keeps what the tool sent, ``panel_frame`` the same sites in the panel frame;
    each is an (n, 4) array of float64 (x_mm, y_mm, dx_um, dy_um), little-endian, row-major
    (``app.store.sitepack``). A measurement's sites are only ever read together (fits, vector
    maps, residuals), and one row instead of 49 makes an import's writes a small share of its
    time. No foreign key: the row is written by the service that writes its measurement, in the
    same transaction.
    """

    __tablename__ = "measurement_sites"

    panel: Mapped[str] = mapped_column(String(64), primary_key=True)
    measurement_id: Mapped[uuid.UUID] = mapped_column(Uuid, primary_key=True)
    n_sites: Mapped[int]
    posted: Mapped[bytes] = mapped_column(LargeBinary)
    panel_frame: Mapped[bytes] = mapped_column(LargeBinary)


class Fit(Base):
    """The least-squares fit of one measurement, terms in the panel frame (raw units)."""

    __tablename__ = "fits"
    __table_args__ = (
        ForeignKeyConstraint(
            ["panel", "measurement_id"], ["measurements.panel", "measurements.id"]
        ),
    )

    panel: Mapped[str] = mapped_column(String(64), primary_key=True)
    measurement_id: Mapped[uuid.UUID] = mapped_column(Uuid, primary_key=True)
    model: Mapped[str] = mapped_column(String(16))
    requested: Mapped[str] = mapped_column(String(16))
    note: Mapped[str | None] = mapped_column(Text)
    tx: Mapped[float]
    ty: Mapped[float]
    sx: Mapped[float]
    sy: Mapped[float]
    ox: Mapped[float]
    oy: Mapped[float]
    kx: Mapped[float]
    ky: Mapped[float]
    mean_x_um: Mapped[float]
    mean_y_um: Mapped[float]
    sigma_x_um: Mapped[float]
    sigma_y_um: Mapped[float]
    max_residual_um: Mapped[float]
    max_residual_x_mm: Mapped[float]
    max_residual_y_mm: Mapped[float]
    #: Largest leverage of the model over the product's check points (fit guard); None for fits
    #: stored before it was kept.
    leverage: Mapped[float | None]


class PanelEstimate(Base):
    """The running estimate of a panel, rewritten in the transaction of every accepted
    measurement, so that reads never recompute from raw data."""

    __tablename__ = "panel_states"

    panel: Mapped[str] = mapped_column(ForeignKey("panels.serial"), primary_key=True)
    layers_a: Mapped[list[Any]]
    layers_b: Mapped[list[Any]]
    missing_a: Mapped[list[Any]]
    missing_b: Mapped[list[Any]]
    ftb_worst_um: Mapped[float] = mapped_column(Float, index=True)
    ftb_worst_x_mm: Mapped[float]
    ftb_worst_y_mm: Mapped[float]
    ftb_points: Mapped[StoredPoints] = mapped_column(Typed(points_adapter))
    l2l_worst_um: Mapped[float]
    stack: Mapped[StoredStack | None] = mapped_column(Typed(StoredStack))
    forecast: Mapped[StoredForecast | None] = mapped_column(Typed(StoredForecast))
    p_exceed: Mapped[float | None] = mapped_column(Float, index=True)
    risk: Mapped[str] = mapped_column(String(16), index=True)
    risk_rule: Mapped[str] = mapped_column(String(40))
    reasons: Mapped[list[Any]]
    updated_at: Mapped[datetime] = mapped_column(Stamp, default=utcnow)


class Hold(Base):
    __tablename__ = "holds"

    panel: Mapped[str] = mapped_column(ForeignKey("panels.serial"), primary_key=True)
    id: Mapped[uuid.UUID] = mapped_column(Uuid, primary_key=True, default=uuid.uuid4)
    state: Mapped[str] = mapped_column(String(16), default="open")  # open | closed
    kind: Mapped[str] = mapped_column(String(16))  # automatic | manual
    rule: Mapped[str] = mapped_column(String(40))
    severity: Mapped[int]
    reason: Mapped[str] = mapped_column(Text)
    figures: Mapped[dict[str, Any]]
    held_at: Mapped[datetime] = mapped_column(Stamp, default=utcnow)
    held_by: Mapped[str] = mapped_column(String(100))
    disposition: Mapped[str | None] = mapped_column(String(16))  # release | scrap | rework
    disposition_note: Mapped[str | None] = mapped_column(Text)
    disposed_at: Mapped[datetime | None] = mapped_column(Stamp)
    disposed_by: Mapped[str | None] = mapped_column(String(100))


# The hold list's own order (worst first, then oldest), so its first page is read off the index
# however many holds the store has kept.
Index("ix_holds_queue", Hold.state, Hold.severity.desc(), Hold.held_at, Hold.panel, Hold.id)


class RejectedUpload(Base):
    """Every upload that was refused, with its body and the reason: nothing is dropped silently."""

    __tablename__ = "rejected_uploads"

    id: Mapped[int] = mapped_column(primary_key=True)
    received_at: Mapped[datetime] = mapped_column(Stamp, default=utcnow)
    endpoint: Mapped[str] = mapped_column(String(200))
    key_label: Mapped[str] = mapped_column(String(100), default="")
    status: Mapped[int]
    reason: Mapped[str] = mapped_column(Text)
    errors: Mapped[list[Any]]
    content_type: Mapped[str] = mapped_column(String(200), default="")
    body: Mapped[bytes] = mapped_column(LargeBinary)


class IdempotencyRecord(Base):
    """The stored answer to a request sent with an Idempotency-Key header."""

    __tablename__ = "idempotency_records"

    key: Mapped[str] = mapped_column(String(200), primary_key=True)
    key_owner: Mapped[int] = mapped_column(Integer, primary_key=True)  # api key id
    body_sha256: Mapped[str] = mapped_column(String(64))
    status_code: Mapped[int]
    response: Mapped[dict[str, Any]]
    created_at: Mapped[datetime] = mapped_column(Stamp, default=utcnow)


class ApiKey(Base):
    """An API key, stored only as its SHA-256 hash and a short non-secret prefix."""

    __tablename__ = "api_keys"

    id: Mapped[int] = mapped_column(primary_key=True)
    prefix: Mapped[str] = mapped_column(String(16), unique=True)
    sha256: Mapped[str] = mapped_column(String(64), unique=True)
    role: Mapped[str] = mapped_column(String(16))
    label: Mapped[str] = mapped_column(String(100))
    created_at: Mapped[datetime] = mapped_column(Stamp, default=utcnow)
    revoked_at: Mapped[datetime | None] = mapped_column(Stamp)


class AuditEntry(Base):
    __tablename__ = "audit_log"

    id: Mapped[int] = mapped_column(primary_key=True)
    at: Mapped[datetime] = mapped_column(Stamp, default=utcnow, index=True)
    actor: Mapped[str] = mapped_column(String(100))
    action: Mapped[str] = mapped_column(String(40))
    subject: Mapped[str] = mapped_column(String(100), index=True)
    details: Mapped[dict[str, Any]]


# The FTB analysis reads one product's runs in a time window, and one exposure tool's runs over
# time.
Index("ix_measurements_time", Measurement.measured_at)
Index("ix_measurements_exposure_tool_time", Measurement.exposure_tool, Measurement.measured_at)
