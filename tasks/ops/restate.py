"""Restating an accepted month: a corrected extract replaces the accepted one, on request, on record.

A file that replaces an accepted one is refused by ingest (an extract changed without notice is a
defect). `ledgerband restate --period P --reason ...` is the explicit path: the accepted loads of P are
marked `restated` (kept in raw.* for lineage, no longer staged), the request is recorded in
ops.restatements, and the month runs again on the corrected file(s) in the landing folder. If that run
does not accept the new file, the old loads are put back: a failed restatement never leaves the month
without data. Later months' features are rebuilt by their own next run (or a backfill with --force).
"""

from __future__ import annotations

import uuid
from collections.abc import Sequence
from datetime import datetime
from pathlib import Path

import duckdb

from ledgerband.tasks.core.errors import LedgerbandError
from ledgerband.tasks.core.period import Period
from ledgerband.tasks.core.queries import run_query
from ledgerband.tasks.core.warehouse import apply_schema, transaction
from ledgerband.tasks.ingest import loads
from ledgerband.tasks.ingest.extract_contract import sha256_file
from ledgerband.tasks.ingest.manifest import find_manifests


def begin(
    con: duckdb.DuckDBPyConnection,
    period: Period,
    landing: Path,
    reason: str,
    expected_sources: Sequence[str] = (),
) -> str:
    """Mark the period's accepted loads as restated and record the request; returns its id."""
    apply_schema(con)
    accepted = con.execute(
        "select load_id, source_file, sha256 from ops.loads where dataset = ? and period = ? and status = ?",
        [loads.LEDGER, str(period), loads.ACCEPTED],
    ).fetchall()
    if not accepted:
        raise LedgerbandError(f"{period} has no accepted extract to restate; run the month instead")
    manifests = find_manifests(landing, period, expected_sources)
    if not manifests:
        raise LedgerbandError(
            f"no corrected extract for {period} in {landing / str(period)} (manifest and file)"
        )
    new = {sha256_file(m.extract_path) for m in manifests}
    if new <= {sha for _, _, sha in accepted}:
        raise LedgerbandError(
            f"the extract(s) for {period} in {landing / str(period)} are the accepted ones, unchanged: put the "
            "corrected file and its manifest there first"
        )
    if not reason.strip():
        raise LedgerbandError("a restatement needs a reason (--reason), kept with the record")
    restatement = str(uuid.uuid4())
    now = datetime.now()
    with transaction(con):
        for load_id, source_file, sha in accepted:
            con.execute(
                "update ops.loads set status = ?, reason = ?, decided_at = ? where load_id = ?",
                [loads.RESTATED, f"restated {now:%Y-%m-%d}: {reason}", now, load_id],
            )
            con.execute(
                "insert into ops.restatements values (?, ?, ?, ?, ?, ?, ?, 'pending', null, null)",
                [restatement, str(period), load_id, source_file, sha, reason, now],
            )
    return restatement


def finish(
    con: duckdb.DuckDBPyConnection, restatement: str, period: Period, run_id: str | None, error: str | None
):
    """Close the request; when the new file was not accepted, put the old loads back in force."""
    with transaction(con):
        if error is not None:
            still = con.execute(
                "select count(*) from ops.loads where dataset = ? and period = ? and status = ?",
                [loads.LEDGER, str(period), loads.ACCEPTED],
            ).fetchall()[0][0]
            if still == 0:
                run_query(
                    con,
                    "ops",
                    "restore_restated_loads",
                    status=loads.ACCEPTED,
                    reason=f"kept: the restatement failed ({error[:200]})",
                    restatement_id=restatement,
                )
        con.execute(
            "update ops.restatements set status = ?, run_id = ?, error = ? where restatement_id = ?",
            ["failed" if error else "done", run_id, error, restatement],
        )
