"""``stackledger analysis`` against each database through STACKLEDGER_DATABASE_URL."""

from __future__ import annotations

import pytest
from typer.testing import CliRunner

from app.cli import cli
from app.config import get_settings
from tests.api.test_analysis import _scenario


@pytest.fixture
def env(db, monkeypatch):
    monkeypatch.setenv("STACKLEDGER_DATABASE_URL", db.engine.url.render_as_string(
        hide_password=False))
    get_settings.cache_clear()
    yield db
    get_settings.cache_clear()


def test_commands_print_tables_and_write_csv_and_parquet(env, tmp_path):
    pq = pytest.importorskip("pyarrow.parquet")
    _scenario(env, flip="x", biased=("T2", "B"), bias=(1.0, 2.0), lots=2, panels=3)
    r = CliRunner().invoke(cli, ["analysis", "fingerprints", "--product", "FP", "--csv",
                                 str(tmp_path), "--parquet", str(tmp_path)])
    assert r.exit_code == 0, r.output
    assert "fingerprints: what_if" in r.stdout and "T2" in r.stdout
    table = pq.read_table(tmp_path / "fingerprints-fingerprints.parquet").to_pylist()
    csv_lines = (tmp_path / "fingerprints-fingerprints.csv").read_text().splitlines()
    assert len(csv_lines) == len(table) + 2  # caption and header
    assert {row["exposure_tool"] for row in table} == {"T1", "T2", "T3"}
    for command in (["lots"], ["trend", "--period", "week"], ["drift"], ["shares"]):
        r = CliRunner().invoke(cli, ["analysis", *command, "--product", "FP"])
        assert r.exit_code == 0, (command, r.output)
    r = CliRunner().invoke(cli, ["analysis", "vectors", "L0-00", "A", "1"])
    assert r.exit_code == 0 and "vectors: sites" in r.stdout
    bad = CliRunner().invoke(cli, ["analysis", "lots", "--product", "NOPE"])
    assert bad.exit_code == 2 and "unknown product" in bad.stderr
    bad = CliRunner().invoke(cli, ["analysis", "drift", "--product", "FP", "--lam", "0"])
    assert bad.exit_code == 2 and "lam" in bad.stderr
