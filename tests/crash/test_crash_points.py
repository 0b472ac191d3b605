"""A run killed at any stage boundary loses nothing, and the rerun gives the clean run's answer.

Each test runs `ledgerband run` in a subprocess that ends itself abruptly (`os._exit`, as SIGKILL would:
no cleanup runs) at one named point (tasks/ops/faults.py), then runs the month again and compares with a run
that was never interrupted. Marked `crash` (about 11 minutes with the disk cases): `make test-crash`; CI runs it after the
default suite. The runs use the CLI's own temporary Prefect server, so the test also sees what a killed
run leaves behind.
"""

from __future__ import annotations

import time
from pathlib import Path

import duckdb
import pytest

from ledgerband.tasks.core.runtime import orphaned_servers
from ledgerband.tasks.core.settings import Settings
from ledgerband.tasks.ops.faults import FAULT_EXIT_CODE, POINTS
from tests.crash.conftest import PERIOD
from tests.crash.conftest import run_cli as _run
from tests.monthly_cli import reader_tables

# Points after the publish transaction commits: the killed run left a whole snapshot of the month.
PUBLISHED_BEFORE_THE_CRASH = {"mid_publish", "after_swap"}


def _warehouse_figures(home: Path) -> tuple:
    con = duckdb.connect(str(Settings(home=home).warehouse_path), read_only=True)
    try:
        return con.execute(
            "select count(*), sum(amount), count(distinct load_id) from staging.transactions"
        ).fetchall()[0]
    finally:
        con.close()


@pytest.fixture(scope="module")
def clean(clean_home):
    return reader_tables(clean_home), _warehouse_figures(clean_home)


def _alive(pids: list[int]) -> list[int]:
    """Processes still running (a zombie waiting for init to reap it has ended)."""
    alive = []
    for pid in pids:
        try:
            state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
        except OSError:
            continue
        if state != "Z":
            alive.append(pid)
    return alive


@pytest.mark.parametrize("point", list(POINTS))
def test_a_run_killed_here_is_rerun_to_the_clean_answer(point, tmp_path, landing, clean):
    home = tmp_path / "home"
    crashed = _run(home, landing, fault=point)
    assert crashed.returncode == FAULT_EXIT_CODE, crashed.stdout + crashed.stderr

    # The readers' copy is never partial: absent (nothing published yet) or a whole earlier copy.
    reader = Settings(home=home).published_path
    if reader.exists():
        reader_tables(home)

    # The killed run's temporary Prefect server is found as an orphan; the next run ends it.
    orphans = orphaned_servers(home / "prefect")
    rerun = _run(home, landing)
    assert rerun.returncode == 0, rerun.stdout + rerun.stderr
    time.sleep(0.5)
    assert _alive(orphans) == []
    assert orphaned_servers(home / "prefect") == []

    tables, figures = dict(clean[0]), clean[1]
    assert _warehouse_figures(home) == figures  # same rows and amounts staged: nothing lost or doubled
    got = reader_tables(home)
    # The published tables equal a clean run's, history included: when the killed run's publish had
    # committed, the rerun's identical snapshot replaced it (the month is in history once).
    assert got == tables
    con = duckdb.connect(str(Settings(home=home).warehouse_path), read_only=True)
    try:
        runs = con.execute("select run_id, status, error from ops.runs order by started_at").fetchall()
        snapshots = con.execute(
            "select run_id from published.snapshots where period = ?", [PERIOD]
        ).fetchall()
    finally:
        con.close()
    assert [status for _, status, _ in runs] == ["crashed", "published"]
    assert snapshots == [(runs[1][0],)]
    if point in PUBLISHED_BEFORE_THE_CRASH:
        assert "replaced by it" in runs[0][2]
