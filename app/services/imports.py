"""CSV import of site rows, all or nothing per file.

One row per site, header ``panel,layer,side,frame,tool,measured_at,x_mm,y_mm,dx_um,dy_um``
(columns in any order). Consecutive rows with the same panel, layer, side, frame, tool and
measured_at form one measurement; a measurement whose rows reappear later in the file,
not next to each other, is an error rather than a silent second measurement.

The file is read in chunks (``import_chunk_rows``), checked and fitted chunk by chunk (fits
vectorised over the chunk's measurements) and written inside one transaction; after the first
error nothing more is written but checking goes on, so the answer lists every problem (up to
``MAX_REPORTED``) with row, column and message, and the transaction is rolled back. When every
row is good, the states of the touched panels are rebuilt once each, at the end.
"""

from __future__ import annotations

import io
import uuid
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import IO, Any, Final

import numpy as np
import pandas as pd
from sqlalchemy import select
from sqlalchemy.orm import Session

from app.config import get_settings
from app.db import Database
from app.errors import DomainError, FieldError, InvalidInput
from app.overlay.fit import fit_many, reach_of
from app.overlay.frames import mirror_sites
from app.schemas.measurements import ImportRead
from app.services import holds, rejections, state
from app.services.history import learn
from app.services.measurements import fit_row
from app.services.products import check_points
from app.store import bulk
from app.store.tables import Fit, Measurement, Panel, PanelState, Product, Site, utcnow

COLUMNS: Final = ("panel", "layer", "side", "frame", "tool", "measured_at",
                  "x_mm", "y_mm", "dx_um", "dy_um")
NUMERIC: Final = ("x_mm", "y_mm", "dx_um", "dy_um")
KEY: Final = ["panel", "layer", "side", "frame", "tool", "measured_at"]
MAX_REPORTED: Final = 200

Progress = Callable[[int], None]


@dataclass
class _Run:
    """What one import has seen so far."""

    name: str
    label: str
    errors: list[FieldError] = field(default_factory=list)
    rows: int = 0
    measurements: int = 0
    superseded: int = 0
    panels: dict[str, tuple[Panel, Product] | None] = field(default_factory=dict)
    current: dict[tuple[str, str, int], uuid.UUID] = field(default_factory=dict)
    seen_keys: set[tuple[Any, ...]] = field(default_factory=set)
    last_key: tuple[Any, ...] | None = None
    touched: set[str] = field(default_factory=set)

    def error(self, row: int, column: str | None, message: str) -> None:
        if len(self.errors) < MAX_REPORTED:
            self.errors.append(FieldError(message=message, row=row, column=column))


def _text(stream: IO[bytes]) -> io.TextIOWrapper:
    return io.TextIOWrapper(stream, encoding="utf-8", errors="strict", newline="")


def _check_header(text: io.TextIOWrapper) -> list[str]:
    try:
        header = text.readline()
    except UnicodeDecodeError as exc:
        raise InvalidInput(f"the file is not UTF-8 text (byte {exc.start} of the first line)",
                           [FieldError(message="not UTF-8", row=0)]) from exc
    names = [h.strip().lstrip("\ufeff") for h in header.rstrip("\r\n").split(",")]
    missing = [c for c in COLUMNS if c not in names]
    unknown = [c for c in names if c not in COLUMNS]
    if missing or unknown or len(names) != len(set(names)):
        parts = []
        if missing:
            parts.append(f"missing {', '.join(missing)}")
        if unknown:
            parts.append(f"unknown {', '.join(unknown)}")
        if len(names) != len(set(names)):
            parts.append("a column appears twice")
        raise InvalidInput(
            f"wrong CSV header ({'; '.join(parts)}); expected: {','.join(COLUMNS)}",
            [FieldError(message="wrong header", row=0)],
        )
    return names


def _chunks(text: io.TextIOWrapper, names: list[str], size: int) -> Iterator[pd.DataFrame]:
    reader = pd.read_csv(
        text, names=names, header=None, dtype=str, keep_default_na=False, chunksize=size,
        engine="c",
    )
    try:
        yield from reader
    except UnicodeDecodeError as exc:
        raise InvalidInput(f"the file is not UTF-8 text (byte {exc.start} of a chunk)",
                           [FieldError(message="not UTF-8", row=0)]) from exc
    except pd.errors.ParserError as exc:
        raise InvalidInput(f"the file is not CSV as expected: {exc}") from exc


def _load_panels(session: Session, run: _Run, serials: list[str]) -> None:
    # Sorted, so that two imports lock shared panels in the same order (no deadlock per chunk).
    new = sorted(s for s in serials if s not in run.panels)
    if not new:
        return
    for start in range(0, len(new), 500):
        part = new[start:start + 500]
        rows = session.execute(
            select(Panel, Product).join(Product, Product.id == Panel.product_id)
            .where(Panel.serial.in_(part)).with_for_update(of=Panel)
        ).all()
        found = {p.serial: (p, prod) for p, prod in rows}
        current = session.execute(
            select(Measurement.panel, Measurement.side, Measurement.layer, Measurement.id)
            .where(Measurement.panel.in_(part), Measurement.superseded_by.is_(None))
        ).all()
        for serial, side, layer, mid in current:
            run.current[(serial, side, layer)] = mid
        for s in part:
            run.panels[s] = found.get(s)


def _numbers(column: pd.Series) -> np.ndarray:
    """Text to float64; text that is not a number becomes NaN (and is reported as such)."""
    try:  # the common case, every cell a number: numpy's cast is twice as fast as to_numeric
        return np.asarray(column.to_numpy(), dtype=np.float64)
    except ValueError:
        return pd.to_numeric(column, errors="coerce").to_numpy(dtype=np.float64)


def _row_checks(df: pd.DataFrame, run: _Run, first_row: int) -> pd.DataFrame:
    """Row-level checks, vectorised; returns the frame with parsed columns."""
    settings = get_settings()
    rows = np.arange(first_row, first_row + len(df))
    bad = np.zeros(len(df), dtype=bool)

    def flag(mask: np.ndarray, column: str, message: Callable[[int], str]) -> None:
        nonlocal bad
        for i in np.flatnonzero(mask & ~bad)[: MAX_REPORTED]:
            run.error(int(rows[i]), column, message(int(i)))
        bad |= mask

    for c in NUMERIC:
        values = _numbers(df[c])
        flag(~np.isfinite(values), c, lambda i, c=c: f"'{df[c].iat[i]}' is not a finite number")
        df[c] = values
    layer = pd.to_numeric(df["layer"], errors="coerce").to_numpy(dtype=np.float64)
    flag(~np.isfinite(layer) | (layer != np.round(layer)), "layer",
         lambda i: f"'{df['layer'].iat[i]}' is not a whole layer number")
    df["layer"] = np.where(np.isfinite(layer), layer, 0).astype(np.int64)
    flag(~df["side"].isin(["A", "B"]).to_numpy(), "side",
         lambda i: f"side must be 'A' or 'B', got '{df['side'].iat[i]}'")
    flag(~df["frame"].isin(["tool", "panel"]).to_numpy(), "frame",
         lambda i: f"frame must be 'tool' or 'panel', got '{df['frame'].iat[i]}'")
    tool_length = df["tool"].str.len().to_numpy()
    flag((tool_length == 0) | (tool_length > 64), "tool",
         lambda i: "tool must be 1 to 64 characters")
    # One measurement's rows share a time: parse each distinct text once.
    codes, texts = pd.factorize(df["measured_at"])
    parsed = pd.to_datetime(pd.Series(texts), errors="coerce", utc=True, format="ISO8601")
    zoned = pd.Series(texts).str.contains(r"(?:Z|[+-]\d\d:?\d\d)$", regex=True)
    stamps = pd.Series(parsed.to_numpy()[codes], index=df.index)
    flag((stamps.isna() | ~zoned.to_numpy()[codes]).to_numpy(), "measured_at",
         lambda i: f"'{df['measured_at'].iat[i]}' is not an ISO 8601 time with a time zone")
    df["stamp"] = stamps
    length = np.hypot(df["dx_um"].to_numpy(), df["dy_um"].to_numpy())
    limit = settings.max_abs_displacement_um
    flag(length > limit, "dx_um",
         lambda i: f"displacement of {length[i]:.1f} um is over {limit:.0f} um (1 mm)")
    known = df["panel"].isin([s for s, e in run.panels.items() if e is not None]).to_numpy()
    flag(~known, "panel", lambda i: f"panel '{df['panel'].iat[i]}' is not registered")
    scrapped = df["panel"].isin(
        [s for s, e in run.panels.items() if e is not None and e[0].status == "scrapped"])
    flag(scrapped.to_numpy(), "panel", lambda i: f"panel '{df['panel'].iat[i]}' is scrapped; "
         "no further measurements are accepted for it")
    df["row"] = rows
    return df


def _group_checks(df: pd.DataFrame, run: _Run) -> None:
    """Checks over each measurement's rows (product limits, site count, duplicate sites, rows
    kept together), vectorised over the chunk: one Python step per measurement at most."""
    settings = get_settings()
    starts, counts = _bounds(df)
    rows = df["row"].to_numpy()
    heads = df.iloc[starts]
    entries = [run.panels.get(serial) for serial in heads["panel"]]
    for j, key in enumerate(heads[KEY].itertuples(index=False, name=None)):
        if key in run.seen_keys:
            run.error(int(rows[starts[j]]), "panel", "rows of this measurement appear earlier "
                      "in the file, not next to these; keep a measurement's rows together")
        run.seen_keys.add(key)
        entry = entries[j]
        if entry is None:
            continue
        product, layer = entry[1], int(key[1])
        if not 1 <= layer <= product.layers_per_side:
            run.error(int(rows[starts[j]]), "layer", f"layer must be 1..{product.layers_per_side}"
                      f" for product '{product.code}', got {layer}")
        if counts[j] > settings.max_sites_per_measurement:
            run.error(int(rows[starts[j]]), None, f"{counts[j]} sites in one measurement; at "
                      f"most {settings.max_sites_per_measurement} are accepted")
    half = np.array([(e[1].panel_width_mm / 2, e[1].panel_height_mm / 2) if e else (np.inf,) * 2
                     for e in entries]).reshape(-1, 2)
    half_rows = np.repeat(half, counts, axis=0)
    x, y = df["x_mm"].to_numpy(), df["y_mm"].to_numpy()
    for i in np.flatnonzero((np.abs(x) > half_rows[:, 0]) | (np.abs(y) > half_rows[:, 1]))[:20]:
        run.error(int(rows[i]), "x_mm", f"site ({x[i]}, {y[i]}) mm lies outside the panel "
                  "(coordinates are about the panel centre)")
    group = np.repeat(np.arange(len(starts)), counts)
    order = np.lexsort((y, x, group))
    same = ((group[order][1:] == group[order][:-1]) & (x[order][1:] == x[order][:-1])
            & (y[order][1:] == y[order][:-1]))
    for i in np.sort(order[1:][same])[:20]:
        run.error(int(rows[i]), "x_mm",
                  f"site ({x[i]}, {y[i]}) mm appears more than once in the measurement")


def _bounds(df: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    """First row and row count of each measurement (consecutive rows of one group)."""
    group = df["group"].to_numpy()
    starts = np.flatnonzero(np.r_[True, group[1:] != group[:-1]])
    return starts, np.diff(np.r_[starts, len(df)])


def _write(session: Session, df: pd.DataFrame, run: _Run) -> None:
    """Fit and store the chunk's measurements (only called while the file has no error)."""
    starts, counts = _bounds(df)
    x, y = df["x_mm"].to_numpy(), df["y_mm"].to_numpy()
    dx, dy = df["dx_um"].to_numpy(), df["dy_um"].to_numpy()
    px, py, pdx, pdy = x.copy(), y.copy(), dx.copy(), dy.copy()
    heads = df.iloc[starts]
    products = [run.panels[s][1] for s in heads["panel"]]  # type: ignore[index]
    # Side B posted in its tool frame goes to the panel frame: one mirror call per flip axis.
    in_tool_b = ((heads["side"] == "B") & (heads["frame"] == "tool")).to_numpy()
    flips = np.array([p.flip_axis for p in products])
    for axis in ("x", "y"):
        rows = np.repeat(in_tool_b & (flips == axis), counts)
        if rows.any():
            px[rows], py[rows], pdx[rows], pdy[rows] = mirror_sites(
                x[rows], y[rows], dx[rows], dy[rows], side="B", flip_axis=axis)
    trapezoid = np.array([p.model_terms == 8 for p in products])
    reaches = {p.id: reach_of(check_points(p)) for p in {p.id: p for p in products}.values()}
    fits: list[Any] = [None] * len(starts)
    for flag in (False, True):
        idx = np.flatnonzero(trapezoid == flag)
        if not len(idx):
            continue
        sel = np.concatenate([np.arange(starts[i], starts[i] + counts[i]) for i in idx])
        reach = np.array([reaches[products[i].id] for i in idx])
        for i, f in zip(idx, fit_many(px[sel], py[sel], pdx[sel], pdy[sel], counts[idx],
                                      trapezoid=flag, reach_mm=reach), strict=True):
            fits[i] = f
    received = utcnow()
    ids = [uuid.uuid4() for _ in starts]
    superseded_by: list[uuid.UUID | None] = [None] * len(starts)
    position = {}
    updates: list[tuple[uuid.UUID, str, uuid.UUID]] = []
    for j, head in enumerate(heads.itertuples()):
        key = (head.panel, head.side, int(head.layer))
        old = run.current.get(key)
        if old is not None:
            run.superseded += 1
            if old in position:
                superseded_by[position[old]] = ids[j]
            else:
                updates.append((ids[j], head.panel, old))
        run.current[key] = ids[j]
        position[ids[j]] = j
        run.touched.add(head.panel)
    bulk.insert(session, Measurement.__table__, [
        (h.panel, ids[j], int(h.layer), h.side, h.frame, h.tool, h.stamp.to_pydatetime(),
         received, int(counts[j]), superseded_by[j], "import", run.label)
        for j, h in enumerate(heads.itertuples())
    ])
    if updates:
        bulk.supersede(session, updates)
    seq = np.arange(len(df)) - np.repeat(starts, counts)
    # Site rows are streamed, not listed: a million tuples alive at once would cost memory and
    # garbage-collector passes. Ids go as the 32 hex digits both databases take for a UUID.
    site_ids = np.repeat(np.array([i.hex for i in ids], dtype=object), counts)
    bulk.insert(session, Site.__table__, zip(
        df["panel"].to_numpy(), site_ids, seq.tolist(), x.tolist(), y.tolist(),
        dx.tolist(), dy.tolist(), px.tolist(), py.tolist(), pdx.tolist(), pdy.tolist(),
        strict=True), stored_form=True)
    fit_columns = [c.name for c in Fit.__table__.columns]
    fit_rows = (fit_row(h.panel, ids[j], fits[j]) for j, h in enumerate(heads.itertuples()))
    bulk.insert(session, Fit.__table__, [tuple(r[c] for c in fit_columns) for r in fit_rows])
    run.measurements += len(starts)


def _assign_groups(df: pd.DataFrame, run: _Run) -> pd.DataFrame:
    change = np.zeros(len(df), dtype=bool)
    change[0] = True
    for column in KEY:
        values = df[column].to_numpy()
        change[1:] |= values[1:] != values[:-1]
    df["group"] = np.cumsum(change)
    return df


def import_csv(
    *, db: Database, stream: IO[bytes], name: str, principal_label: str,
    progress: Progress | None = None,
) -> ImportRead:
    """Import one CSV file; raises InvalidInput with every row error when any row is bad."""
    settings = get_settings()
    run = _Run(name=name, label=principal_label)
    text = _text(stream)
    names = _check_header(text)
    with db.transaction() as session:
        carry: pd.DataFrame | None = None
        next_row = 1
        for chunk in _chunks(text, names, settings.import_chunk_rows):
            if not len(chunk):
                continue
            chunk = chunk[list(COLUMNS)]
            _load_panels(session, run, chunk["panel"].unique().tolist())
            chunk = _row_checks(chunk, run, next_row)
            next_row += len(chunk)
            df = chunk if carry is None else pd.concat([carry, chunk], ignore_index=True)
            df = _assign_groups(df, run)
            # The last measurement may go on in the next chunk: keep it back.
            last = df["group"].iat[-1]
            carry = df[df["group"] == last].drop(columns=["group"])
            df = df[df["group"] != last]
            _process(session, df, run)
            if progress:
                progress(len(chunk))
        if carry is not None and len(carry):
            _process(session, _assign_groups(carry.reset_index(drop=True), run), run)
        if next_row == 1:
            raise InvalidInput(f"'{name}' holds a header and no rows",
                               [FieldError(message="no rows", row=1)])
        if run.errors:
            shown = f" (first {MAX_REPORTED} shown)" if len(run.errors) >= MAX_REPORTED else ""
            raise InvalidInput(
                f"'{name}' was not imported: {len(run.errors)} problem(s){shown}"
                f"; first at row {run.errors[0].row}: {run.errors[0].message}",
                run.errors,
            )
        _refresh_touched(session, run)
        return ImportRead(
            file=name, rows=run.rows, measurements=run.measurements, panels=len(run.touched),
            superseded=run.superseded,
        )


def import_path(
    *, db: Database, path: Path, label: str, progress: Progress | None = None
) -> ImportRead:
    """Import a CSV file from disk (CLI, demo); a refused file is kept with its reason."""
    try:
        with path.open("rb") as stream:
            return import_csv(db=db, stream=stream, name=path.name, principal_label=label,
                              progress=progress)
    except DomainError as exc:
        with path.open("rb") as stream:
            body = stream.read(rejections.MAX_KEPT_BYTES + 1)
        rejections.record(db=db, endpoint=f"cli import {path.name}", key_label=label,
                          status=exc.status, reason=exc.detail,
                          errors=[e.as_dict() for e in exc.errors], content_type="text/csv",
                          body=body, truncated=len(body) > rejections.MAX_KEPT_BYTES)
        raise


def _process(session: Session, df: pd.DataFrame, run: _Run) -> None:
    if not len(df):
        return
    run.rows += len(df)
    _group_checks(df, run)
    if not run.errors:
        _write(session, df, run)


def _refresh_touched(session: Session, run: _Run) -> None:
    histories: dict[int, Any] = {}
    serials = sorted(run.touched)
    layers = state.current_layers_many(session, serials)
    # Load the existing states in a few queries and keep them referenced (the identity map
    # holds objects weakly), so that each refresh finds its state without a query and flush.
    kept = [st for start in range(0, len(serials), 500) for st in session.scalars(
        select(PanelState).where(PanelState.panel.in_(serials[start:start + 500])))]
    with session.no_autoflush:
        for serial in serials:
            panel, product = run.panels[serial]  # type: ignore[misc]
            if product.id not in histories:
                histories[product.id] = learn(session, product=product)
            st, assessment = state.refresh(session, panel=panel, product=product,
                                           histories=histories[product.id],
                                           layers=layers[serial])
            holds.apply_automatic(session, panel=panel, state=st, assessment=assessment)
    del kept

