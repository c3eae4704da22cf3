"""The batch form: measurements, one or thousands, as the pipeline takes them.

A POST is a batch of one; a CSV file is read into one batch. From here on both take the same
checks (``app.services.checks``), the same fit, supersede and writes (``app.services.intake``).
The only thing that differs is the locator, which says where a problem is in what was sent: a
JSON pointer for a posted body, a file line and column for a CSV file.

Columns are per measurement (``panel`` .. ``genealogy``, ``counts``) or per site (``x`` ..
``dy``, as sent: side B may be in its facing-side frame); the sites of measurement i are the
``counts[i]`` rows after those of measurement i-1.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from datetime import UTC, datetime
from functools import cached_property
from typing import Final, Protocol

import numpy as np
from numpy.typing import NDArray

from app.errors import FieldError

#: Optional fields a fab may post with a measurement (all text, 64 characters at most).
GENEALOGY: Final = ("metrology_tool", "recipe", "artwork", "shift")
SITE_FIELDS: Final = ("x_mm", "y_mm", "dx_um", "dy_um")
#: Beyond this a layer number is not read at all (it could not be any layer, and would not fit
#: the batch's integers); within it, the product's range is checked by the catalogue.
LAYER_BOUND: Final = 1_000_000
_ZONED: Final = re.compile(r"(?:Z|z|[+-]\d\d(?::?\d\d)?)$")


class Locator(Protocol):
    def where(self, measurement: int, site: int | None, field: str, message: str) -> FieldError:
        """A located problem: ``site`` is None for a field of the measurement itself."""
        ...


class JsonLocator:
    """A posted body: one measurement, sites under /sites."""

    def where(self, measurement: int, site: int | None, field: str, message: str) -> FieldError:
        pointer = f"/{field}" if site is None else f"/sites/{site}/{field}"
        return FieldError(message=message, pointer=pointer)


@dataclass(frozen=True)
class CsvLocator:
    """A CSV file: ``first_line[i]`` is the file line of measurement i's first site row (the
    header is line 1; one record a line)."""

    first_line: NDArray[np.int64]

    def where(self, measurement: int, site: int | None, field: str, message: str) -> FieldError:
        line = int(self.first_line[measurement]) + (site or 0)
        return FieldError(message=message, line=line, column=field)


@dataclass
class MeasurementBatch:
    panel: list[str]
    layer: NDArray[np.int64]
    side: list[str]
    frame: list[str]
    exposure_tool: list[str]
    measured_at: list[str]
    counts: NDArray[np.int64]
    x: NDArray[np.float64]
    y: NDArray[np.float64]
    dx: NDArray[np.float64]
    dy: NDArray[np.float64]
    locator: Locator
    genealogy: dict[str, list[str | None]] = field(default_factory=dict)

    def __len__(self) -> int:
        return len(self.panel)

    @cached_property
    def times(self) -> list[datetime | None]:
        """``measured_at`` parsed once (None where it is not an ISO 8601 time with a zone)."""
        return parse_times(self.measured_at)

    @property
    def starts(self) -> NDArray[np.int64]:
        """Index of each measurement's first site row."""
        return np.concatenate(([0], np.cumsum(self.counts)[:-1])).astype(np.int64)

    def site_owner(self) -> NDArray[np.int64]:
        """For each site row, the index of its measurement."""
        return np.repeat(np.arange(len(self.counts), dtype=np.int64), self.counts)

    def genealogy_rows(self) -> list[dict[str, str | None]]:
        """Per measurement, every genealogy field (None where not posted)."""
        columns = [(name, self.genealogy.get(name)) for name in GENEALOGY]
        return [{name: values[i] if values else None for name, values in columns}
                for i in range(len(self))]


def parse_times(texts: list[str]) -> list[datetime | None]:
    """ISO 8601 times with a time zone, as aware UTC datetimes; None where a text is not one.
    Each distinct text is parsed once (a measurement's rows share one)."""
    seen: dict[str, datetime | None] = {}
    out: list[datetime | None] = []
    for text in texts:
        if text not in seen:
            seen[text] = _time(text)
        out.append(seen[text])
    return out


def _time(text: object) -> datetime | None:
    if not isinstance(text, str) or not _ZONED.search(text.strip()):
        return None
    try:
        stamp = datetime.fromisoformat(text.strip())
    except ValueError:
        return None
    return stamp.astimezone(UTC) if stamp.tzinfo is not None else None
