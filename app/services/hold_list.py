"""The hold list as the line supervisor reads it at shift start: CSV and plain text.

CSV cells are safe against formula injection (OWASP ASVS 5.0, requirement 1.2.10, and the
OWASP "CSV Injection" page: prefix with a single quote, and quote every cell): a text cell that
starts with = + - @, a tab, a carriage return or NUL gets a leading single quote, and so does
every line inside a cell that starts with one after a line break, for readers that take a bare
CR or LF inside quotes as the end of a row. Every text cell is quoted; numbers stay numbers.

The header is the first line, so that any CSV reader with its defaults reads the columns. The
disposition caution goes where people read it: the JSON list, the terminal, the README and the
``Stackledger-Caution`` header of the CSV answer.
"""

from __future__ import annotations

import csv
import io
import re
from typing import Any, Final

from app.schemas.holds import HoldList, HoldRead

COLUMNS: Final = (
    "severity", "risk", "rule", "panel", "lot", "product", "layers_reached_a",
    "layers_reached_b", "ftb_current_um", "ftb_limit_um", "ftb_final_forecast_um",
    "ftb_final_band_low_um", "ftb_final_band_high_um", "p_final_over_limit", "reason",
    "held_since", "held_by", "kind", "hold_id",
)
_FORMULA_START: Final = ("=", "+", "-", "@", "\t", "\r", "\0")
_FORMULA_AFTER_BREAK: Final = re.compile(r"([\r\n])(?=[=+\-@\t\r\0])")


def safe_cell(value: Any) -> Any:
    """A CSV cell that a spreadsheet will not run as a formula, whatever it takes for a row."""
    if not isinstance(value, str):
        return value
    value = _FORMULA_AFTER_BREAK.sub(r"\1'", value)
    return "'" + value if value.startswith(_FORMULA_START) else value


def _row(h: HoldRead) -> list[Any]:
    return [
        h.severity, h.risk, h.rule, h.panel, h.lot, h.product, h.layers_reached.A,
        h.layers_reached.B, round(h.ftb_current_um, 2), h.ftb_limit_um,
        None if h.ftb_final_forecast_um is None else round(h.ftb_final_forecast_um, 2),
        None if h.ftb_final_band_um is None else round(h.ftb_final_band_um[0], 2),
        None if h.ftb_final_band_um is None else round(h.ftb_final_band_um[1], 2),
        None if h.p_final_over_limit is None else round(h.p_final_over_limit, 4), h.reason,
        h.held_since.isoformat(), h.held_by, h.kind, h.id,
    ]


def holds_csv(hold_list: HoldList) -> str:
    out = io.StringIO()
    # QUOTE_NONNUMERIC: every text cell (and an empty one) is quoted, numbers are not.
    writer = csv.writer(out, lineterminator="\n", quoting=csv.QUOTE_NONNUMERIC)
    writer.writerow(COLUMNS)
    for h in hold_list.holds:
        writer.writerow(["" if v is None else safe_cell(v) for v in _row(h)])
    return out.getvalue()
