"""tasks/ops/restate.py `finish`: a failed restatement puts its own old loads back, and only those."""

from __future__ import annotations

from datetime import datetime

from ledgerband.tasks.core.period import Period
from ledgerband.tasks.ops import restate

AT = datetime(2026, 11, 2, 6, 0)


def _loads(con, *rows: tuple[str, str, str]) -> None:
    for load_id, period, status in rows:
        con.execute(
            "insert into ops.loads (load_id, dataset, period, source_file, sha256, status, reason, loaded_at) "
            "values (?, 'ledger', ?, ?, ?, ?, 'restated 2026-11-02: wrong amounts', ?)",
            [load_id, period, f"{load_id}.csv", load_id, status, AT],
        )


def _restatement(con, restatement_id: str, period: str, old_load_id: str) -> None:
    con.execute(
        "insert into ops.restatements values (?, ?, ?, ?, ?, 'wrong amounts', ?, 'pending', null, null)",
        [restatement_id, period, old_load_id, f"{old_load_id}.csv", old_load_id, AT],
    )


def _status(con) -> dict[str, tuple[str, str]]:
    return {
        r[0]: (r[1], r[2]) for r in con.execute("select load_id, status, reason from ops.loads").fetchall()
    }


def test_a_failed_restatement_puts_back_its_old_loads_and_no_others(con):
    # R1 set L1 aside for October; R2 (another month's request) set L9 aside. October's corrected file
    # was rejected, so no October load is accepted now.
    _loads(con, ("L1", "2026-10", "restated"), ("L2", "2026-10", "rejected"), ("L9", "2026-09", "restated"))
    _restatement(con, "R1", "2026-10", "L1")
    _restatement(con, "R2", "2026-09", "L9")

    restate.finish(con, "R1", Period.parse("2026-10"), "run-1", "quality gate stopped the corrected file")

    status = _status(con)
    assert status["L1"] == (
        "accepted",
        "kept: the restatement failed (quality gate stopped the corrected file)",
    )
    assert status["L2"][0] == "rejected" and status["L9"][0] == "restated"
    assert con.execute(
        "select restatement_id, status, run_id from ops.restatements order by 1"
    ).fetchall() == [
        ("R1", "failed", "run-1"),
        ("R2", "pending", None),
    ]


def test_a_restatement_whose_file_was_accepted_leaves_the_old_loads_set_aside(con):
    _loads(con, ("L1", "2026-10", "restated"), ("L2", "2026-10", "accepted"))
    _restatement(con, "R1", "2026-10", "L1")

    # An error after the new file was accepted (a later stage) must not bring the old file back.
    restate.finish(con, "R1", Period.parse("2026-10"), "run-1", "report could not be written")

    assert _status(con)["L1"][0] == "restated"
    assert con.execute("select status from ops.restatements").fetchall() == [("failed",)]
