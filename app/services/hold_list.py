"""The hold list as the line supervisor reads it at shift start: CSV and plain text.

CSV cells are safe against formula injection (OWASP ASVS 5.0, requirement 1.2.10): a string
cell that starts with = + - @, a tab, a carriage return or NUL gets a leading single quote;
numbers stay numbers.
"""

from __future__ import annotations

import csv
import io
from typing import Any, Final

from app.schemas.holds import CAUTION, HoldList, HoldRead

COLUMNS: Final = (
    "severity", "risk", "panel", "lot", "product", "layers_a", "layers_b", "ftb_now_um",
    "forecast_final_um", "p_exceed", "reason", "held_since", "held_by", "kind", "hold_id",
)
_FORMULA_START: Final = ("=", "+", "-", "@", "\t", "\r", "\0")


def safe_cell(value: Any) -> Any:
    """A CSV cell that a spreadsheet will not run as a formula."""
    if isinstance(value, str) and value.startswith(_FORMULA_START):
        return "'" + value
    return value


def _row(h: HoldRead) -> list[Any]:
    return [
        h.severity, h.risk, h.panel, h.lot, h.product, h.layers_reached.get("A", 0),
        h.layers_reached.get("B", 0), round(h.ftb_now_um, 2),
        None if h.forecast_final_um is None else round(h.forecast_final_um, 2),
        None if h.p_exceed is None else round(h.p_exceed, 4), h.reason,
        h.held_since.isoformat(), h.held_by, h.kind, h.id,
    ]


def holds_csv(hold_list: HoldList) -> str:
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow([f"# {CAUTION}"])
    writer.writerow(COLUMNS)
    for h in hold_list.holds:
        writer.writerow([safe_cell(v) for v in _row(h)])
    return out.getvalue()
