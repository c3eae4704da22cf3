"""The glossary (docs/glossary.md) lists the codes the code uses, with the meanings the OpenAPI
gives: a code added, dropped or reworded on one side and not the other fails here."""

from __future__ import annotations

import re
from pathlib import Path
from typing import Any, get_args

import pytest

from app.main import create_app
from app.overlay import risk
from app.schemas import codes
from app.schemas.holds import DispositionCreate, HoldRead
from app.schemas.panels import FitModel, RiskLevel
from app.services import checks, keys
from app.services.lifecycle import PanelStatus

GLOSSARY = Path(__file__).resolve().parents[1] / "docs" / "glossary.md"
ROW = re.compile(r"^\| `([^`]+)` \| (.+) \|$")


def _documented() -> dict[str, list[tuple[str, str]]]:
    tables: dict[str, list[tuple[str, str]]] = {}
    current: list[tuple[str, str]] | None = None
    for line in GLOSSARY.read_text(encoding="utf-8").splitlines():
        if line.startswith("### "):
            current = tables.setdefault(line[4:].strip(), [])
        elif current is not None and (m := ROW.match(line)):
            current.append((m.group(1), m.group(2)))
    return tables


def test_every_code_table_is_in_the_glossary_word_for_word():
    documented = _documented()
    assert set(documented) == set(codes.TABLES)
    for heading, table in codes.TABLES.items():
        assert documented[heading] == [(str(c), m) for c, m in table], heading


def _literal(model: Any, field: str) -> list[Any]:
    annotation = model.model_fields[field].annotation
    values = [v for arg in (get_args(annotation) or (annotation,))
              for v in (get_args(arg) or [arg]) if v is not type(None)]
    return values


@pytest.mark.parametrize("table,in_code", [
    (codes.RISK_LEVELS, list(risk.RISK_LEVELS)),
    (codes.RISK_LEVELS, list(get_args(RiskLevel))),
    (codes.HOLD_RULES, [rule for rule, _ in risk.RULES] + ["manual"]),
    (codes.PANEL_STATUSES, sorted(s.value for s in PanelStatus)),
    (codes.HOLD_STATES, _literal(HoldRead, "state")),
    (codes.HOLD_KINDS, _literal(HoldRead, "kind")),
    (codes.DISPOSITIONS, _literal(DispositionCreate, "action")),
    (codes.FRAMES, list(checks.FRAMES)),
    (codes.FIT_MODELS, list(get_args(FitModel))),
    (codes.FIT_MODELS, list(codes.FIT_MODEL_NAMES.values())),
    (codes.ROLES, list(keys.ROLES)),
    (codes.SEVERITIES, sorted({max(risk.severity(level), 1) for level in risk.RISK_LEVELS},
                              reverse=True)),
])
def test_codes_match_what_the_code_uses(table, in_code):
    documented = codes.codes(table)
    if table is codes.PANEL_STATUSES:
        documented = sorted(documented)
    assert documented == in_code


def test_every_role_is_named_in_the_permissions():
    used = set().union(*keys.PERMISSIONS.values())
    assert used == set(keys.ROLES)


def test_the_openapi_gives_each_code_its_meaning():
    schemas = create_app().openapi()["components"]["schemas"]
    fields = {
        ("HoldRead", "rule"): codes.HOLD_RULES, ("HoldRead", "risk"): codes.RISK_LEVELS,
        ("HoldRead", "severity"): codes.SEVERITIES, ("HoldRead", "state"): codes.HOLD_STATES,
        ("HoldRead", "kind"): codes.HOLD_KINDS, ("PanelRead", "status"): codes.PANEL_STATUSES,
        ("PanelRead", "risk"): codes.RISK_LEVELS, ("PanelRead", "risk_rule"): codes.HOLD_RULES,
        ("MeasurementCreate", "frame"): codes.FRAMES, ("MeasurementCreate", "side"): codes.SIDES,
        ("FitRead", "model"): codes.FIT_MODELS,
        ("DispositionCreate", "action"): codes.DISPOSITIONS,
    }
    for (schema, field), table in fields.items():
        description = schemas[schema]["properties"][field]["description"]
        for code, meaning in table:
            assert f"- `{code}`: {meaning}" in description, (schema, field, code)
