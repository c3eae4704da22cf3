"""How the pages phrase figures: units, rounding, risk levels in words and shapes.

Level is never told by colour alone: each level has a word and a shape of its own
(WCAG 2.2, success criterion 1.4.1 "Use of Color").
"""

from __future__ import annotations

from collections.abc import Callable
from datetime import datetime
from typing import Any, Final

from app.schemas.figures import LayersReached

#: Risk level -> (words, shape glyph, CSS class). Worst first.
LEVELS: Final = {
    "over_limit": ("Over limit", "\u25a0", "lvl-over"),   # filled square
    "at_risk": ("At risk", "\u25b2", "lvl-risk"),         # filled triangle
    "watch": ("Watch", "\u25c6", "lvl-watch"),            # filled diamond
    "clear": ("Clear", "\u25cb", "lvl-clear"),            # open circle
}
STATUSES: Final = {"in_process": "In process", "on_hold": "On hold", "scrapped": "Scrapped",
                   "complete": "Complete"}


def um(value: float | None, digits: int = 1) -> str:
    return "–" if value is None else f"{value:.{digits}f} µm"


def number(value: float | None, digits: int = 1) -> str:
    return "–" if value is None else f"{value:.{digits}f}"


def reached(layers: LayersReached) -> str:
    """Layers reached, said one way in the CLI and on the pages: "A 9 / B 8"."""
    return f"A {layers.A} / B {layers.B}"


def probability(value: float | None) -> str:
    """p as a percentage, never shown as a flat 0 % or 100 % (it is a sampled estimate)."""
    if value is None:
        return "–"
    if value < 0.001:
        return "< 0.1 %"
    if value > 0.999:
        return "> 99.9 %"
    return f"{value * 100:.1f} %"


def when(value: datetime | str | None) -> str:
    if value is None:
        return "–"
    if isinstance(value, str):
        value = datetime.fromisoformat(value)
    return value.strftime("%Y-%m-%d %H:%M UTC")


def level_words(level: str) -> str:
    return LEVELS.get(level, (level, "?", ""))[0]


def level_shape(level: str) -> str:
    return LEVELS.get(level, (level, "?", ""))[1]


def level_class(level: str) -> str:
    return LEVELS.get(level, (level, "?", ""))[2]


def status_words(status: str) -> str:
    return STATUSES.get(status, status)


def rule_words(rule: str) -> str:
    return rule.replace("_", " ")


def first_sentence(text: str, limit: int = 120) -> str:
    """The one-line reason of a list row: its first sentence, cut at a word near ``limit``
    characters (the panel page shows every reason whole)."""
    head, dot, _ = text.partition(". ")
    head = head + "." if dot else text
    if len(head) <= limit:
        return head
    return head[:limit].rsplit(" ", 1)[0].rstrip(",;(") + " …"


def missing(layers: Any) -> str:
    """Missing layers as 'A3, B5'."""
    return ", ".join([f"A{k}" for k in layers.A] + [f"B{k}" for k in layers.B])


def audit_details(details: dict[str, Any]) -> str:
    """The few figures of an audit entry a person reads; the API has them all."""
    parts = []
    if note := details.get("note") or details.get("reason"):
        parts.append(f"“{note}”")
    if rework := details.get("rework"):
        parts.append(f"rework side {rework.get('side')} layer {rework.get('layer')}")
    # Entries written before migration 0008 name the figures as they did then.
    ftb = details.get("ftb_current_um", details.get("ftb_worst_um"))
    if ftb is not None:
        parts.append(f"current FTB {ftb:.1f} µm")
    p = details.get("p_final_over_limit", details.get("p_exceed"))
    if p is not None:
        parts.append(f"P(final over limit) {probability(p)}")
    if rule := details.get("rule"):
        parts.append(f"rule {rule_words(rule)}")
    for key in ("product", "lot"):
        if key in details:
            parts.append(f"{key} {details[key]}")
    return "; ".join(parts) or "–"


FILTERS: Final[dict[str, Callable[..., Any]]] = {
    "um": um, "number": number, "probability": probability, "when": when,
    "level_words": level_words, "level_shape": level_shape, "level_class": level_class,
    "status_words": status_words, "rule_words": rule_words, "first_sentence": first_sentence,
    "missing": missing, "audit_details": audit_details, "reached": reached,
}
