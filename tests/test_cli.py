"""The command line, against each database through STACKLEDGER_DATABASE_URL."""

from __future__ import annotations

import pytest
from typer.testing import CliRunner

from app.cli import cli
from app.config import get_settings
from tests.factories import make_panel, make_product

HEADER = "panel,layer,side,frame,tool,measured_at,x_mm,y_mm,dx_um,dy_um\n"


@pytest.fixture
def env(db, monkeypatch):
    monkeypatch.setenv("STACKLEDGER_DATABASE_URL", db.engine.url.render_as_string(
        hide_password=False))
    get_settings.cache_clear()
    make_product(db)
    make_panel(db, "P1")
    yield db
    get_settings.cache_clear()


def test_key_create_prints_the_key_alone(env):
    r = CliRunner().invoke(cli, ["key", "create", "--role", "engineer", "--label", "shift A"])
    assert r.exit_code == 0, r.output
    (line,) = r.stdout.strip().splitlines()
    assert line.startswith("sl_") and len(line) > 30
    bad = CliRunner().invoke(cli, ["key", "create", "--role", "boss", "--label", "x"])
    assert bad.exit_code == 2 and "role must be one of" in bad.stderr


def test_import_panel_and_holds(env, tmp_path):
    rows = [f"P1,1,A,tool,EXP-T1,2026-11-02T06:00:00Z,{x},{y},20,0\n"
            for x in (-200, 0, 200) for y in (-200, 0, 200)]
    path = tmp_path / "m.csv"
    path.write_text(HEADER + "".join(rows), encoding="utf-8")
    r = CliRunner().invoke(cli, ["import", str(path)])
    assert r.exit_code == 0, r.output
    assert "imported 9 rows: 1 measurements of 1 panels" in r.stderr
    r = CliRunner().invoke(cli, ["panel", "P1"])
    assert r.exit_code == 0 and "over_limit" in r.stdout and "FTB worst 20.0 um" in r.stdout
    r = CliRunner().invoke(cli, ["holds", "--csv"])
    assert r.exit_code == 0
    lines = r.stdout.splitlines()
    assert lines[0].startswith('"severity","risk","panel"') and "quality procedures" in r.stderr
    assert lines[1].split(",")[2] == '"P1"'
    r = CliRunner().invoke(cli, ["holds"])
    assert "P1" in r.stdout and "qualified engineers" in r.stdout


def test_bad_import_is_refused_and_kept(env, tmp_path):
    from app.services import rejections

    path = tmp_path / "bad.csv"
    path.write_text(HEADER + "P1,1,C,tool,EXP-T1,2026-11-02T06:00:00Z,0,0,1,1\n", encoding="utf-8")
    r = CliRunner().invoke(cli, ["import", str(path)])
    assert r.exit_code == 2
    assert "line 2, column side" in r.stderr
    kept = rejections.latest(db=env)
    assert kept.endpoint == "cli import bad.csv" and kept.body == path.read_bytes()


def test_long_key_label_is_refused_in_one_line(env):
    r = CliRunner().invoke(cli, ["key", "create", "--role", "tool", "--label", "x" * 101])
    assert r.exit_code == 2
    assert "label is 101 characters long; at most 100 are kept" in r.stderr
    assert "Traceback" not in r.output
    ok = CliRunner().invoke(cli, ["key", "create", "--role", "tool", "--label", "x" * 100])
    assert ok.exit_code == 0, ok.output


def test_refused_import_of_a_long_file_name_is_recorded(env, tmp_path):
    from app.services import rejections

    path = tmp_path / ("m" * 206 + ".csv")  # 210 characters: over the 200 kept of an endpoint
    path.write_text(HEADER + "P1,1,C,tool,EXP-T1,2026-11-02T06:00:00Z,0,0,1,1\n", encoding="utf-8")
    r = CliRunner().invoke(cli, ["import", str(path)])
    assert r.exit_code == 2 and "Traceback" not in r.output
    kept = rejections.latest(db=env)
    assert kept is not None and kept.body == path.read_bytes()
    assert len(kept.endpoint) == 200 and kept.endpoint.startswith("cli import mmm")
    assert kept.endpoint.endswith("...")
def test_demo_prints_the_pages_address_and_a_key_per_role(tmp_path):
    r = CliRunner().invoke(cli, ["demo", "--no-serve", "--database", str(tmp_path / "d.db"),
                                 "--port", "8123"])
    assert r.exit_code == 0, r.output
    assert "http://127.0.0.1:8123/sign-in" in r.output
    for role in ("tool", "engineer", "supervisor", "admin"):
        assert any(line.split()[:1] == [role] and "sl_" in line
                   for line in r.output.splitlines()), role
