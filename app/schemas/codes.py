"""Every code the API, CLI, CSV and pages use, with its one-line meaning.

The words are those of docs/glossary.md; ``tests/test_glossary.py`` compares that page's code
tables with these, so a code added here and not there (or the other way round) fails the tests.
Each table is (code, meaning), in the order a reader meets them.
"""

from __future__ import annotations

from typing import Any, Final

RISK_LEVELS: Final = (
    ("clear", "Nothing to act on: current FTB, worst L2L and forecast are inside every "
              "threshold."),
    ("watch", "Look at it: the forecast gives a small chance of ending over the FTB limit, "
              "or the current FTB is near it, or a via may miss part of its pad."),
    ("at_risk", "Likely trouble: the chance of ending over the FTB limit (or of a via "
                "missing its pad) has reached the product's at-risk threshold."),
    ("over_limit", "Out of limit now: the current FTB or a layer's L2L is over its limit, or "
                   "a via is off its pad."),
)

HOLD_RULES: Final = (
    ("current_ftb_over_limit", "The current FTB at a check point is over the FTB limit "
                               "(over_limit)."),
    ("via_off_pad", "A layer's L2L offset runs past its vias' capture margin by more than two "
                    "fit standard errors (over_limit)."),
    ("l2l_over_limit", "A layer's worst L2L is over the L2L limit by more than two fit "
                       "standard errors; for products without via settings (over_limit)."),
    ("forecast_at_risk", "The chance that the final FTB ends over the limit reached the "
                         "at-risk threshold, or has not yet fallen below its leave "
                         "threshold (at_risk)."),
    ("via_miss_at_risk", "The chance that a via misses part of its pad reached the at-risk "
                         "threshold (at_risk)."),
    ("forecast_watch", "The chance that the final FTB ends over the limit reached the watch "
                       "threshold, or has not yet fallen below its leave threshold (watch)."),
    ("via_miss_watch", "The chance that a via misses part of its pad reached the watch "
                       "threshold (watch)."),
    ("current_ftb_near_limit", "The current FTB is at or above 70 % of the FTB limit "
                               "(watch)."),
    ("clear", "No rule fired (clear)."),
    ("manual", "Held by a person, with a written reason."),
)

SEVERITIES: Final = (
    (3, "over_limit: worst; listed first."),
    (2, "at_risk."),
    (1, "A manual hold on a clear or watched panel."),
)

PANEL_STATUSES: Final = (
    ("in_process", "Layers still to come; not on hold."),
    ("on_hold", "Held: takes measurements, waits for a disposition."),
    ("complete", "Every layer of both sides is on; not on hold."),
    ("scrapped", "Scrapped by a disposition; takes nothing more."),
)

HOLD_STATES: Final = (
    ("open", "Waiting for a disposition."),
    ("closed", "Dispositioned (released, scrapped or reworked)."),
)

HOLD_KINDS: Final = (
    ("automatic", "Put on by stackledger when a panel reached at_risk or over_limit."),
    ("manual", "Put on by a person, with a reason."),
)

DISPOSITIONS: Final = (
    ("release", "The panel goes on as it is."),
    ("scrap", "The panel is scrapped; nothing more is accepted for it."),
    ("rework", "A named layer and side is stripped and built again; its measurement is set "
               "aside."),
)

FRAMES: Final = (
    ("facing_side", "Site coordinates and vectors as seen facing the measured side (how the "
                    "metrology and exposure tools see it; the exposure tool's own frame). On "
                    "side A this is the panel frame; side B is mirrored into the panel frame."),
    ("panel", "Already in the panel frame: as seen facing side A, origin at the panel "
              "centre."),
)

FIT_MODELS: Final = (
    ("8_terms", "Tx Ty Sx Sy Ox Oy Kx Ky: translation, scale, rotation and trapezoid."),
    ("6_terms", "Tx Ty Sx Sy Ox Oy: translation, scale and rotation."),
    ("2_terms", "Tx Ty: translation only (too few or too clustered sites for more)."),
)

ROLES: Final = (
    ("uploader", "Posts measurements and imports and registers panels (the metrology tool's "
                 "key); sees its own refused uploads."),
    ("engineer", "Reads panels, holds, analysis and the audit trail; registers panels; puts "
                 "manual holds on."),
    ("supervisor", "What an engineer does, plus dispositions (release, scrap, rework)."),
    ("admin", "Everything, including products and keys."),
)

SIDES: Final = (
    ("A", "The side facing up in the panel frame."),
    ("B", "The other side, built with the panel turned over."),
)

#: The internal fit model names (``app.overlay.fit``) as the API, CLI and pages say them.
FIT_MODEL_NAMES: Final = {"trapezoid": "8_terms", "linear": "6_terms", "translation": "2_terms"}

#: Every table by its heading in docs/glossary.md.
TABLES: Final[dict[str, tuple[tuple[Any, str], ...]]] = {
    "Risk levels": RISK_LEVELS,
    "Hold rules": HOLD_RULES,
    "Severities": SEVERITIES,
    "Panel statuses": PANEL_STATUSES,
    "Hold states": HOLD_STATES,
    "Hold kinds": HOLD_KINDS,
    "Dispositions": DISPOSITIONS,
    "Frames": FRAMES,
    "Fit models": FIT_MODELS,
    "Roles": ROLES,
    "Sides": SIDES,
}


def codes(table: tuple[tuple[Any, str], ...]) -> list[Any]:
    return [code for code, _ in table]


def explained(lead: str, table: tuple[tuple[Any, str], ...]) -> dict[str, Any]:
    """Field arguments giving each value's meaning in the description (OpenAPI has no
    per-value description); for a field whose type already lists the values."""
    lines = "\n".join(f"- `{code}`: {meaning}" for code, meaning in table)
    return {"description": f"{lead}\n\n{lines}"}


def described(lead: str, table: tuple[tuple[Any, str], ...]) -> dict[str, Any]:
    """``explained`` plus the values as the schema's enum, for a plain str or int field."""
    return {**explained(lead, table), "json_schema_extra": {"enum": codes(table)}}


def meaning(table: tuple[tuple[Any, str], ...], code: Any) -> str:
    return dict(table)[code]
