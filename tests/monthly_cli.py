"""Running `ledgerband run` in a subprocess on a state folder of its own, and reading what it published.

Shared by the suites that compare whole runs (tests/crash, tests/scale).
"""

from __future__ import annotations

import os
import subprocess
import sys
import time
from pathlib import Path

import duckdb

from ledgerband.tasks.core.settings import Settings
from ledgerband.tasks.publish.snapshot import READER_TABLES

# Columns that name the run (or its model) that wrote a row.
VOLATILE = ("run_id", "snapshot_id", "model_version")


def isolated_env(home: Path, **extra: str) -> dict[str, str]:
    """This process's environment for a `ledgerband run` of its own: none of the test session's
    LEDGERBAND_* variables and no PREFECT_API_URL (the run starts its own temporary Prefect API)."""
    env = {k: v for k, v in os.environ.items() if not k.startswith(("PREFECT_API_URL", "LEDGERBAND_"))}
    env.update(LEDGERBAND_HOME=str(home), PREFECT_HOME=str(home / "prefect"), **extra)
    return env


def run_command(period: str, landing: Path) -> list[str]:
    """`ledgerband run --period <period> --landing <landing>` with this interpreter."""
    return [
        sys.executable,
        "-m",
        "ledgerband.flows.cli",
        "run",
        "--period",
        period,
        "--landing",
        str(landing),
    ]


def run_month(
    home: Path, landing: Path, period: str, env: dict[str, str] | None = None, label: str = "run"
) -> subprocess.CompletedProcess:
    """`ledgerband run --period <period>` with `<landing>/../ledgerband.toml`; stdout is the run's log.

    Only the given LEDGERBAND_* variables reach the run (`isolated_env`).
    """
    run_env = isolated_env(home, LEDGERBAND_CONFIG=str(landing.parent / "ledgerband.toml"), **(env or {}))
    command = run_command(period, landing)
    # Output to a file, not a pipe: a killed run's orphaned server would hold a pipe open (and the test
    # would wait on it) until it is reaped.
    home.mkdir(parents=True, exist_ok=True)
    log = home.parent / f"{home.name}-{label}-{time.monotonic_ns()}.log"
    with log.open("w") as out:
        done = subprocess.run(command, env=run_env, stdout=out, stderr=subprocess.STDOUT, timeout=900)
    return subprocess.CompletedProcess(command, done.returncode, log.read_text(), "")


def reader_tables(home: Path) -> dict[str, list[tuple]]:
    """The readers' copy, every table, without the columns that name the run that wrote it.

    decisions and snapshots are left out: one row per run by design.
    """
    con = duckdb.connect(str(Settings(home=home).published_path), read_only=True)
    try:
        out = {}
        for name in READER_TABLES:
            if name in ("decisions", "snapshots"):
                continue
            columns = [
                c
                for (c,) in con.execute(
                    "select column_name from information_schema.columns where table_name = ? "
                    "order by ordinal_position",
                    [name],
                ).fetchall()
                if c not in VOLATILE and not c.endswith("_at")
            ]
            listed = ", ".join(f'"{c}"' for c in columns)
            out[name] = con.execute(f"select {listed} from {name} order by all").fetchall()
        return out
    finally:
        con.close()
