"""One run at a time: two real processes, one holding the state folder, one refused (exit 4)."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
from pathlib import Path

import pytest

HOLD = """
import sys, time
from pathlib import Path
from ledgerband.tasks.ops.runlock import run_lock
with run_lock(Path(sys.argv[1]), "2026-10"):
    print("held", flush=True)
    time.sleep(120)
"""


def test_a_second_run_is_refused_while_the_first_holds_the_folder(tmp_path, prefect_api):
    home, landing = tmp_path / "home", tmp_path / "landing"
    landing.mkdir()
    env = {**os.environ, "LEDGERBAND_HOME": str(home)}
    holder = subprocess.Popen(
        [sys.executable, "-c", HOLD, str(home)], stdout=subprocess.PIPE, text=True, env=env
    )
    try:
        assert holder.stdout.readline().strip() == "held"
        second = subprocess.run(
            [
                str(Path(sys.executable).parent / "ledgerband"),
                "run",
                "--period",
                "2026-10",
                "--landing",
                str(landing),
            ],
            capture_output=True,
            text=True,
            env=env,
            timeout=120,
        )
        said = " ".join((second.stdout + second.stderr).split())
        assert second.returncode == 4, said
        assert "another run holds" in said and f"process {holder.pid}" in said and "period 2026-10" in said
        assert not (home / "alerts" / "alerts.jsonl").exists()  # a refused start is not a failure
    finally:
        holder.send_signal(signal.SIGKILL)  # as a crash would end it
        holder.wait(timeout=30)
    # The operating system released the dead run's lock: the next run takes it with nothing to clear.
    from ledgerband.tasks.ops.runlock import run_lock

    with run_lock(home, "2026-10") as me:
        assert me["pid"] == os.getpid()


def test_the_lock_is_exclusive_within_one_machine(tmp_path):
    from ledgerband.tasks.ops.runlock import RunLocked, run_lock

    with run_lock(tmp_path, "2026-09"):
        with pytest.raises(RunLocked, match="period 2026-09") as refused:
            with run_lock(tmp_path, "2026-10"):
                pass
    assert refused.value.exit_code == 4
    with run_lock(tmp_path, "2026-10"):  # free again once the block ends
        pass


def test_a_run_left_running_by_a_dead_process_is_marked_crashed(tmp_path, monkeypatch):
    # Only the lock holder runs; any other 'running' row belongs to a process that is gone. `status`
    # shows it as crashed at once (nobody holds the lock); the next run records it so.
    import duckdb
    from typer.testing import CliRunner

    from ledgerband.flows.cli import app
    from ledgerband.tasks.core.context import RunContext
    from ledgerband.tasks.core.settings import Settings, get_settings
    from ledgerband.tasks.ops.runlock import run_lock
    from ledgerband.tasks.ops.runlog import RunLog

    monkeypatch.setenv("LEDGERBAND_HOME", str(tmp_path))
    get_settings.cache_clear()
    settings = Settings(home=tmp_path)
    killed = RunLog(RunContext.create("2026-09", settings=settings, run_id="killed-run"))
    killed.stages.append({"stage": "ingest", "status": "running", "seconds": None, "detail": None})
    killed._write()  # what a process killed mid-ingest leaves: a row saying 'running'

    shown = CliRunner().invoke(app, ["status"])
    assert "crashed" in shown.output and "killed-run" in shown.output, shown.output
    with run_lock(tmp_path, "2026-09"):  # while a run holds the folder, 'running' may be true
        assert "crashed" not in CliRunner().invoke(app, ["status"]).output

    with run_lock(tmp_path, "2026-10"):
        RunLog(RunContext.create("2026-10", settings=settings, run_id="next-run"))
    con = duckdb.connect(str(settings.warehouse_path), read_only=True)
    rows = dict(con.execute("select run_id, status from ops.runs").fetchall())
    error = con.execute(
        "select error, finished_at is not null from ops.runs where run_id = 'killed-run'"
    ).fetchall()
    con.close()
    assert rows == {"killed-run": "crashed", "next-run": "running"}
    assert "found by run next-run" in error[0][0] and error[0][1]
