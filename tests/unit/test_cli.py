"""The CLI turns user mistakes into one clear line and a non-zero exit code, never a traceback."""

import os
import subprocess
import sys

import duckdb
import pytest
from typer.testing import CliRunner

from ledgerband.flows.cli import app
from ledgerband.tasks.core.warehouse import apply_schema

runner = CliRunner()


@pytest.fixture(autouse=True)
def _home(tmp_path, monkeypatch):
    monkeypatch.setenv("LEDGERBAND_HOME", str(tmp_path / "state"))


def _run(*args):
    result = runner.invoke(app, list(args))
    return result.exit_code, result.output


def test_bad_period_is_refused_before_anything_starts(tmp_path):
    code, output = _run("run", "--period", "2026-13", "--landing", str(tmp_path))
    assert code == 2 and "period '2026-13' is not a month written YYYY-MM" in output
    assert "Traceback" not in output


def test_missing_landing_folder_is_named(tmp_path):
    code, output = _run("run", "--period", "2026-10", "--landing", str(tmp_path / "nowhere"))
    assert code == 2 and f"landing folder {tmp_path / 'nowhere'} does not exist" in output


def test_status_before_any_run_says_what_to_do():
    code, output = _run("status")
    assert code == 2 and "no warehouse yet" in output and "ledgerband demo" in output


def test_misspelt_setting_is_a_configuration_error(monkeypatch):
    monkeypatch.setenv("LEDGERBAND_ACURACY__MIN_BAND_SKILL", "0.5")
    code, output = _run("status")
    assert code == 2 and "configuration error" in output and "LEDGERBAND_ACURACY__MIN_BAND_SKILL" in output


def test_status_while_a_run_holds_the_warehouse_says_so(tmp_path):
    # DuckDB lets no other process open a file that one process writes: hold it here, ask from a child.
    (tmp_path / "state").mkdir()
    writer = duckdb.connect(str(tmp_path / "state" / "warehouse.duckdb"))
    apply_schema(writer)
    try:
        env = {**os.environ, "LEDGERBAND_HOME": str(tmp_path / "state")}
        proc = subprocess.run(
            [sys.executable, "-m", "flows.cli", "status"], capture_output=True, text=True, env=env
        )
    finally:
        writer.close()
    assert proc.returncode == 2
    assert "is in use by another process" in proc.stderr and "Traceback" not in proc.stderr


@pytest.mark.parametrize(
    "args, message",
    [
        (["--format", "xlsx"], "xlsx"),  # only csv and parquet exist
        (["--months", "0"], "--months"),  # at least one month
        (["--end-period", "2026-1"], "is not a month written YYYY-MM"),
    ],
)
def test_demo_options_are_checked_before_anything_runs(args, message):
    code, output = _run("demo", *args)
    assert code == 2 and message in output and "Traceback" not in output
