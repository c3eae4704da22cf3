"""The command line, against each database through STACKLEDGER_DATABASE_URL."""

from __future__ import annotations

import pytest
from typer.testing import CliRunner

from app.cli import cli
from app.config import get_settings
from tests.factories import make_panel, make_product

HEADER = "panel,layer,side,frame,exposure_tool,measured_at,x_mm,y_mm,dx_um,dy_um\n"


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
    rows = [f"P1,1,A,facing_side,EXP-T1,2026-11-02T06:00:00Z,{x},{y},20,0\n"
            for x in (-200, 0, 200) for y in (-200, 0, 200)]
    path = tmp_path / "m.csv"
    path.write_text(HEADER + "".join(rows), encoding="utf-8")
    r = CliRunner().invoke(cli, ["import", str(path)])
    assert r.exit_code == 0, r.output
    assert "imported 9 rows: 1 measurements of 1 panels" in r.stderr
    r = CliRunner().invoke(cli, ["panel", "P1"])
    assert r.exit_code == 0 and "over_limit" in r.stdout and "current FTB 20.0 um" in r.stdout
    r = CliRunner().invoke(cli, ["holds", "--csv"])
    assert r.exit_code == 0
    lines = r.stdout.splitlines()
    assert (
        lines[0].startswith('"severity","risk","rule","panel"') and "quality procedures" in r.stderr
    )
    assert lines[1].split(",")[3] == '"P1"'
    r = CliRunner().invoke(cli, ["holds"])
    assert "P1" in r.stdout and "qualified engineers" in r.stdout


def test_bad_import_is_refused_and_kept(env, tmp_path):
    from app.services import rejections

    path = tmp_path / "bad.csv"
    path.write_text(HEADER + "P1,1,C,facing_side,EXP-T1,2026-11-02T06:00:00Z,0,0,1,1\n",
                    encoding="utf-8")
    r = CliRunner().invoke(cli, ["import", str(path)])
    assert r.exit_code == 2
    assert "line 2, column side" in r.stderr
    kept = rejections.latest(db=env)
    assert kept.endpoint == "cli import bad.csv" and kept.body == path.read_bytes()


def test_long_key_label_is_refused_in_one_line(env):
    r = CliRunner().invoke(cli, ["key", "create", "--role", "uploader", "--label", "x" * 101])
    assert r.exit_code == 2
    assert "label is 101 characters long; at most 100 are kept" in r.stderr
    assert "Traceback" not in r.output
    ok = CliRunner().invoke(cli, ["key", "create", "--role", "uploader", "--label", "x" * 100])
    assert ok.exit_code == 0, ok.output


def test_refused_import_of_a_long_file_name_is_recorded(env, tmp_path):
    from app.services import rejections

    path = tmp_path / ("m" * 206 + ".csv")  # 210 characters: over the 200 kept of an endpoint
    path.write_text(HEADER + "P1,1,C,facing_side,EXP-T1,2026-11-02T06:00:00Z,0,0,1,1\n",
                    encoding="utf-8")
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
    for role in ("uploader", "engineer", "supervisor", "admin"):
        assert any(line.split()[:1] == [role] and "sl_" in line
                   for line in r.output.splitlines()), role


def test_supervisor_holds_and_disposes_from_the_terminal(env):
    r = CliRunner().invoke(cli, ["hold", "P1", "--reason", "suspect [bold]lamination",
                                 "--by", "Shift lead A"])
    assert r.exit_code == 0, r.output
    hold_id = r.stdout.split()[1]
    r = CliRunner().invoke(cli, ["holds"])
    assert r.exit_code == 0 and "Open holds: 1" in r.stdout and hold_id[:8] in r.stdout
    assert "suspect [bold]lamination" in r.stdout  # text as typed, not markup
    r = CliRunner().invoke(cli, ["disposition", hold_id[:8], "--action", "release",
                                 "--note", "re-inspected, fine", "--by", "Shift lead A"])
    assert r.exit_code == 0, r.output
    assert f"hold {hold_id} on P1 closed: release by cli: Shift lead A" in r.stdout
    r = CliRunner().invoke(cli, ["holds", "--state", "closed"])
    assert r.exit_code == 0 and "Closed holds: 1" in r.stdout
    for shown in ("release", "cli: Shift lead A", "re-inspected, fine", hold_id[:8]):
        assert shown in r.stdout, shown
    from app.services import audit

    actions = [e["action"] for e in audit.list_for(db=env, subject="P1")]
    assert actions[-2:] == ["hold", "disposition_release"]
    again = CliRunner().invoke(cli, ["disposition", hold_id[:8], "--action", "scrap", "--note",
                                     "too late", "--by", "x"])
    assert again.exit_code == 2 and "no open hold" in again.stderr
    bad = CliRunner().invoke(cli, ["hold", "P1", "--reason", "x", "--by", "y"])
    assert bad.exit_code == 2 and "--reason" in bad.stderr and "Traceback" not in bad.output


def test_commands_name_the_database_and_never_create_one_by_accident(tmp_path, monkeypatch):
    import sqlite3

    monkeypatch.delenv("STACKLEDGER_DATABASE_URL", raising=False)
    monkeypatch.chdir(tmp_path)
    get_settings.cache_clear()
    for args in (["holds"], ["panel", "P1"], ["import", __file__], ["key", "create", "--role",
                                                                    "uploader", "--label", "x"]):
        r = CliRunner().invoke(cli, args)
        assert r.exit_code == 2, (args, r.output)
        assert "no database at" in r.stderr and "stackledger db upgrade" in r.stderr
        assert len(r.stderr.strip().splitlines()) == 1 and "Traceback" not in r.output
    assert not (tmp_path / "stackledger.db").exists()
    sqlite3.connect(tmp_path / "empty.db").close()
    r = CliRunner().invoke(cli, ["holds", "--database", "empty.db"])
    assert r.exit_code == 2 and "has no stackledger schema" in r.stderr
    r = CliRunner().invoke(cli, ["db", "upgrade", "--database", "fresh.db"])
    assert r.exit_code == 0, r.output
    r = CliRunner().invoke(cli, ["holds", "--database", str(tmp_path / "fresh.db")])
    assert r.exit_code == 0 and "Open holds: 0" in r.stdout
    r = CliRunner().invoke(cli, ["holds"], env={"STACKLEDGER_DATABASE_URL":
                                                f"sqlite:///{tmp_path / 'fresh.db'}"})
    assert r.exit_code == 0 and "Open holds: 0" in r.stdout
    get_settings.cache_clear()


def test_rework_from_the_terminal_names_its_layer_and_side(env, tmp_path):
    rows = [f"P1,{layer},A,facing_side,EXP-T1,2026-11-02T0{layer}:00:00Z,{x},{y},20,0\n"
            for layer in (1, 2) for x in (-200, 0, 200) for y in (-200, 0, 200)]
    path = tmp_path / "m.csv"
    path.write_text(HEADER + "".join(rows), encoding="utf-8")
    assert CliRunner().invoke(cli, ["import", str(path)]).exit_code == 0
    hold_id = CliRunner().invoke(cli, ["holds", "--csv"]).stdout.splitlines()[1].split(",")[-1]
    hold_id = hold_id.strip('"')
    missing = CliRunner().invoke(cli, ["disposition", hold_id, "--action", "rework", "--note",
                                       "strip layer 2", "--by", "lead"])
    assert missing.exit_code == 2 and "layer and the side" in missing.stderr
    r = CliRunner().invoke(cli, ["disposition", hold_id, "--action", "rework", "--layer", "2",
                                 "--side", "A", "--note", "strip layer 2", "--by", "lead"])
    assert r.exit_code == 0, r.output
    assert "layer 2 side A set aside" in r.stdout
    r = CliRunner().invoke(cli, ["panel", "P1"])
    # Layer 2 A (+20 um) set aside: the FTB is layer 1's 20 um alone.
    assert "layers reached A 1 / B 0" in r.stdout and "current FTB 20.0 um" in r.stdout


def test_audit_trail_and_refused_uploads_from_the_terminal(env, tmp_path):
    r = CliRunner().invoke(cli, ["hold", "P1", "--reason", "suspect lamination",
                                 "--by", "Shift lead B"])
    assert r.exit_code == 0, r.output
    bad = tmp_path / "bad.csv"
    bad.write_text(HEADER + "P1,1,C,facing_side,EXP-T1,2026-11-02T06:00:00Z,0,0,1,1\n",
                   encoding="utf-8")
    assert CliRunner().invoke(cli, ["import", str(bad)]).exit_code == 2
    trail = CliRunner().invoke(cli, ["audit", "--panel", "P1"])
    assert trail.exit_code == 0, trail.output
    assert "cli: Shift lead B" in trail.stdout and "hold" in trail.stdout
    assert "panel_register" in trail.stdout
    only = CliRunner().invoke(cli, ["audit", "--actor", "nobody"])
    assert only.exit_code == 0 and "0 entries" in only.stdout
    refused = CliRunner().invoke(cli, ["rejected"])
    assert refused.exit_code == 0, refused.output
    assert "cli import bad.csv" in refused.stdout and "line 2, side" in refused.stdout
