"""CSV import: read a file of site rows into the batch form, then the one pipeline.

One row per site; the header names the columns, in any order:
``panel,layer,side,frame,exposure_tool,measured_at,x_mm,y_mm,dx_um,dy_um``, and optionally
``metrology_tool,recipe,artwork,shift``. Consecutive rows that agree on every column but the
four site columns form one measurement; a measurement whose rows reappear further down, not
next to the first ones, is refused rather than read as a second measurement.

This module only reads: what a cell must be to be read (a number, a whole layer number) is
reported here, with its file line (the header is line 1) and column; everything else is the
catalogue's (``app.services.checks``), exactly as for a posted measurement. A file is all or
nothing, and the answer lists every problem (up to 200), in line order.

A file is also idempotent: its content, by the same API key, is imported once. Sent again
(with or without an Idempotency-Key header) it is answered as a repeat, not applied again.
"""

from __future__ import annotations

import hashlib
import io
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import IO, Any, Final

import numpy as np
import pandas as pd
from sqlalchemy.orm import Session

from app.config import get_settings
from app.db import Database
from app.errors import DomainError, FieldError, InvalidInput
from app.schemas.measurements import ImportRead
from app.services import idempotency, intake, rejections
from app.services.batch import (
    GENEALOGY,
    LAYER_BOUND,
    SITE_FIELDS,
    CsvLocator,
    MeasurementBatch,
)
from app.services.checks import MAX_REPORTED

REQUIRED: Final = ("panel", "layer", "side", "frame", "exposure_tool", "measured_at", *SITE_FIELDS)
OPTIONAL: Final = GENEALOGY

Progress = Callable[[int], None]


@dataclass
class _Reading:
    """What the reader has gathered so far."""

    key_columns: list[str]
    errors: list[FieldError] = field(default_factory=list)
    heads: list[tuple[str, ...]] = field(default_factory=list)
    head_rows: list[int] = field(default_factory=list)
    unreadable: set[int] = field(default_factory=set)
    seen: dict[tuple[str, ...], int] = field(default_factory=dict)
    sites: list[np.ndarray] = field(default_factory=list)
    rows: int = 0
    last_key: tuple[str, ...] | None = None

    def error(self, line: int, column: str | None, message: str) -> None:
        if len(self.errors) < MAX_REPORTED:
            self.errors.append(FieldError(message=message, line=line, column=column))


def _header(text: io.TextIOWrapper) -> list[str]:
    try:
        header = text.readline()
    except UnicodeDecodeError as exc:
        raise InvalidInput(f"the file is not UTF-8 text (byte {exc.start} of the first line)",
                           [FieldError(message="not UTF-8", line=1)]) from exc
    names = [h.strip().lstrip("\ufeff") for h in header.rstrip("\r\n").split(",")]
    missing = [c for c in REQUIRED if c not in names]
    unknown = [c for c in names if c not in REQUIRED and c not in OPTIONAL]
    if missing or unknown or len(names) != len(set(names)):
        parts = []
        if missing:
            parts.append(f"missing {', '.join(missing)}")
        if unknown:
            parts.append(f"unknown {', '.join(unknown)}")
        if len(names) != len(set(names)):
            parts.append("a column appears twice")
        raise InvalidInput(
            f"wrong CSV header ({'; '.join(parts)}); expected: {','.join(REQUIRED)} "
            f"(optional: {','.join(OPTIONAL)})",
            [FieldError(message="wrong header", line=1)],
        )
    return names


def _chunks(text: io.TextIOWrapper, names: list[str], size: int, *, typed: bool
            ) -> pd.io.parsers.TextFileReader:
    """Chunks of the file. ``typed`` reads the site columns as float64 in the parser (several
    times faster than text then a cast); a cell that is not a number makes it fail, and the
    file is then read again as text so that every such cell can be reported."""
    dtype: Any = ({c: np.float64 if c in SITE_FIELDS else str for c in names} if typed
                  else str)
    return pd.read_csv(text, names=names, header=None, dtype=dtype, keep_default_na=False,
                       na_values=[] if not typed else {c: ["nan", "NaN"] for c in SITE_FIELDS},
                       chunksize=size, engine="c", skip_blank_lines=False)


def _numbers(column: pd.Series) -> tuple[np.ndarray, np.ndarray]:
    """Text to float64, and where a text is not a number at all ("NaN" and "inf" are numbers
    here; the catalogue refuses them as not finite)."""
    if column.dtype == np.float64:
        return column.to_numpy(), np.zeros(len(column), bool)
    values = pd.to_numeric(column, errors="coerce").to_numpy(dtype=np.float64)
    spelled = column.str.strip().str.lower().str.lstrip("+-").isin(["nan"]).to_numpy()
    return values, np.isnan(values) & ~spelled


def _read_chunk(chunk: pd.DataFrame, reading: _Reading, first_row: int) -> None:
    n = len(chunk)
    line = first_row + 2  # data row 0 is file line 2
    keys = [chunk[c].fillna("").to_numpy() for c in reading.key_columns]
    change = np.zeros(n, dtype=bool)
    for values in keys:
        change[1:] |= values[1:] != values[:-1]
    first = tuple(str(v[0]) for v in keys)
    change[0] = first != reading.last_key
    reading.last_key = tuple(str(v[-1]) for v in keys)
    owner = len(reading.heads) - 1 + np.cumsum(change)
    for r in np.flatnonzero(change):
        key = tuple(str(v[r]) for v in keys)
        m = len(reading.heads)
        reading.heads.append(key)
        reading.head_rows.append(first_row + int(r))
        if key in reading.seen:
            reading.unreadable.add(m)
            reading.error(line + int(r), "panel",
                          f"rows of this measurement also stand at line {reading.seen[key]}, "
                          "not next to these; keep a measurement's rows together")
        else:
            reading.seen[key] = line + int(r)
    columns = []
    for c in SITE_FIELDS:
        values, not_number = _numbers(chunk[c])
        for r in np.flatnonzero(not_number):
            reading.unreadable.add(int(owner[r]))
            reading.error(line + int(r), c, f"'{chunk[c].iat[r]}' is not a number")
        columns.append(values)
    reading.sites.append(np.column_stack(columns))
    reading.rows += n


def _batch(reading: _Reading) -> tuple[MeasurementBatch, np.ndarray]:
    """The batch of every measurement read, and which ones could be read."""
    m = len(reading.heads)
    usable = np.ones(m, dtype=bool)
    usable[sorted(reading.unreadable)] = False
    column = {c: i for i, c in enumerate(reading.key_columns)}
    layer = np.zeros(m, dtype=np.int64)
    for j, key in enumerate(reading.heads):
        text = key[column["layer"]].strip()
        try:
            value = int(text)
            if abs(value) > LAYER_BOUND:
                raise ValueError(text)
            layer[j] = value
        except ValueError:
            usable[j] = False
            reading.error(reading.head_rows[j] + 2, "layer",
                          f"'{text}' is not a whole layer number")
    head_rows = np.asarray(reading.head_rows, dtype=np.int64)
    counts = np.diff(np.append(head_rows, reading.rows))
    sites = np.concatenate(reading.sites) if reading.sites else np.zeros((0, 4))

    def texts(name: str) -> list[str]:
        return [k[column[name]] for k in reading.heads]

    genealogy: dict[str, list[str | None]] = {
        name: [v or None for v in texts(name)] for name in OPTIONAL if name in column}
    batch = MeasurementBatch(
        panel=texts("panel"),
        layer=layer,
        side=texts("side"),
        frame=texts("frame"),
        exposure_tool=texts("exposure_tool"),
        measured_at=texts("measured_at"),
        counts=counts.astype(np.int64),
        x=sites[:, 0].copy(),
        y=sites[:, 1].copy(),
        dx=sites[:, 2].copy(),
        dy=sites[:, 3].copy(),
        locator=CsvLocator(first_line=head_rows + 2),
        genealogy=genealogy,
    )
    return batch, usable


def read(data: bytes, *, name: str, progress: Progress | None = None
         ) -> tuple[MeasurementBatch, np.ndarray, list[FieldError]]:
    """Read a CSV file into the batch form: (batch, readable measurements, reader's errors)."""
    for typed in (True, False):
        text = io.TextIOWrapper(io.BytesIO(data), encoding="utf-8", errors="strict", newline="")
        names = _header(text)
        reading = _Reading(key_columns=[c for c in names if c not in SITE_FIELDS])
        try:
            for chunk in _chunks(text, names, get_settings().import_chunk_rows, typed=typed):
                if not len(chunk):
                    continue
                _read_chunk(chunk, reading, reading.rows)
                if progress:
                    progress(len(chunk))
            break
        except ValueError as exc:
            if typed and not isinstance(exc, UnicodeDecodeError | pd.errors.ParserError):
                continue  # a site cell is not a number: read again as text to report each one
            raise _unreadable(name, exc) from exc
    if reading.rows == 0:
        raise InvalidInput(f"'{name}' holds a header and no rows",
                           [FieldError(message="no rows", line=2)])
    batch, usable = _batch(reading)
    return batch, usable, reading.errors


def _unreadable(name: str, exc: Exception) -> InvalidInput:
    if isinstance(exc, UnicodeDecodeError):
        return InvalidInput(f"'{name}' is not UTF-8 text (byte {exc.start} of a chunk)",
                            [FieldError(message="not UTF-8")])
    return InvalidInput(f"'{name}' is not CSV as expected: {exc}")


def import_csv(
    *, db: Database, stream: IO[bytes], name: str, principal_label: str,
    owner: int = idempotency.CLI_OWNER,
    idempotency_key: str | None = None, progress: Progress | None = None,
) -> tuple[bool, ImportRead]:
    """Import one CSV file, all or nothing; returns (whether it is a repeat, answer).

    Raises InvalidInput with every problem when anything is wrong.
    """
    data = stream.read()
    digest = hashlib.sha256(data).hexdigest()
    key = idempotency_key or f"file:{digest}"
    if (done := idempotency.stored(db, key=key, owner=owner, digest=digest)) is not None:
        return True, ImportRead.model_validate(done)
    batch, usable, reader_errors = read(data, name=name, progress=progress)
    del data

    def describe(errors: list[FieldError]) -> str:
        shown = f" (first {MAX_REPORTED} shown)" if len(errors) > MAX_REPORTED else ""
        first = errors[0]
        where = f" at line {first.line}" if first.line else ""
        return (f"'{name}' was not imported: {len(errors)} problem(s){shown}; first{where}: "
                f"{first.message}")

    plan = intake.prepare(db, batch, describe=describe, reader_errors=reader_errors,
                          usable=usable)

    def claim(session: Session) -> tuple[bool, ImportRead] | None:
        won = idempotency.claim(session, key=key, owner=owner, digest=digest)
        return None if won is None else (True, ImportRead.model_validate(won))

    def answer(session: Session, outcome: intake.Outcome) -> tuple[bool, ImportRead]:
        read = ImportRead(file=name, rows=int(batch.counts.sum()), measurements=len(batch),
                          panels=len(outcome.panels),
                          superseded=sum(s is not None for s in outcome.superseded))
        idempotency.finish(session, key=key, owner=owner, response=read.model_dump(mode="json"))
        return False, read

    result = intake.write(db, plan, source="import", key_label=principal_label, first=claim,
                          answer=answer)
    assert isinstance(result, tuple)
    return result


def import_path(
    *, db: Database, path: Path, label: str, progress: Progress | None = None
) -> tuple[bool, ImportRead]:
    """Import a CSV file from disk (CLI, demo); a refused file is kept with its reason."""
    try:
        with path.open("rb") as stream:
            return import_csv(db=db, stream=stream, name=path.name, principal_label=label,
                              owner=idempotency.CLI_OWNER, progress=progress)
    except DomainError as exc:
        with path.open("rb") as stream:
            body = stream.read(rejections.MAX_KEPT_BYTES + 1)
        rejections.record(db=db, endpoint=f"cli import {path.name}", key_label=label,
                          status=exc.status, reason=exc.detail,
                          errors=[e.as_dict() for e in exc.errors], content_type="text/csv",
                          body=body, truncated=len(body) > rejections.MAX_KEPT_BYTES)
        raise
