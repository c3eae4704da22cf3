"""How a fitted term is reported on the analysis pages: its name in words and its unit.

The services keep terms in raw units (``app.overlay.model.TERM_NAMES`` order: µm, µm/mm,
µm/mm²). A page shows translation in µm, scale in ppm and the rotation-like terms in µrad
(1 µm/mm = 1000 ppm = 1000 µrad, docs/conventions.md), and trapezoid in µm/m² (1 µm/mm² =
10⁶ µm/m²), so that every figure on an axis or in a table is a number of a few digits.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Final


@dataclass(frozen=True)
class TermUnit:
    words: str
    unit: str
    factor: float  # raw value times factor = reported value

    def shown(self, raw: float | None) -> float | None:
        return None if raw is None else raw * self.factor


TERM_UNITS: Final[dict[str, TermUnit]] = {
    "Tx": TermUnit("translation x", "µm", 1.0),
    "Ty": TermUnit("translation y", "µm", 1.0),
    "Sx": TermUnit("scale x", "ppm", 1e3),
    "Sy": TermUnit("scale y", "ppm", 1e3),
    "Ox": TermUnit("rotation term x", "µrad", 1e3),
    "Oy": TermUnit("rotation term y", "µrad", 1e3),
    "Kx": TermUnit("trapezoid x", "µm/m²", 1e6),
    "Ky": TermUnit("trapezoid y", "µm/m²", 1e6),
}


def term_label(term: str) -> str:
    """'Tx, translation x (µm)': an axis label or a table heading."""
    u = TERM_UNITS[term]
    return f"{term}, {u.words} ({u.unit})"
