"""A panel's status and the one function that moves it.

    in_process --measured (all layers on)--> complete
    in_process | complete --held--> on_hold
    on_hold --released--> in_process, or complete when every layer is on
    on_hold --reworked--> in_process
    on_hold --scrapped--> scrapped (final)

A measurement never changes an on-hold panel's status (the hold decides), and a scrapped panel
takes nothing more.
"""

from __future__ import annotations

from enum import StrEnum

from app.errors import Conflict


class PanelStatus(StrEnum):
    IN_PROCESS = "in_process"
    ON_HOLD = "on_hold"
    SCRAPPED = "scrapped"
    COMPLETE = "complete"


class PanelEvent(StrEnum):
    MEASURED = "measured"
    HELD = "held"
    RELEASED = "released"
    REWORKED = "reworked"
    SCRAPPED = "scrapped"


def next_status(current: str, event: PanelEvent, *, all_layers_on: bool,
                serial: str = "") -> PanelStatus:
    """The status after ``event``; raises Conflict when the event is not allowed now."""
    status = PanelStatus(current)
    built = PanelStatus.COMPLETE if all_layers_on else PanelStatus.IN_PROCESS
    name = f"panel '{serial}'" if serial else "the panel"
    if status is PanelStatus.SCRAPPED:
        raise Conflict(f"{name} is scrapped; nothing more is accepted for it")
    if event is PanelEvent.MEASURED:
        return status if status is PanelStatus.ON_HOLD else built
    if event is PanelEvent.HELD:
        return PanelStatus.ON_HOLD
    if status is not PanelStatus.ON_HOLD:
        raise Conflict(f"{name} is not on hold; only a held panel can be {event.value}")
    if event is PanelEvent.RELEASED:
        return built
    if event is PanelEvent.REWORKED:
        return PanelStatus.IN_PROCESS
    return PanelStatus.SCRAPPED
