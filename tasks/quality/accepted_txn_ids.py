"""ops.accepted_txn_ids: the txn_ids of accepted ledger loads, for the repeated-booking rule.

The rule `txn_id_not_loaded_before` asks, for every record of a new extract, whether its txn_id came in
an earlier accepted file (and was not quarantined there). Asked of raw.ledger_lines, that joins every
month ever loaded with ops.loads and the quarantine; this key table holds just the answer's two columns.

It is derived data and is treated so: its definition is the statement that writes it
(`warehouse/sql/queries/quality/write_accepted_txn_ids.sql`). `ops.accepted_txn_id_loads` records which
loads it holds and each one's quarantined count when its keys were written. `sync` compares that with ops.loads before every
check: keys of a load no longer accepted (restated) or whose quarantine changed are deleted, keys of an
accepted load not held (newly accepted, changed, or a warehouse from before this table) are written,
all in one transaction. So the table is whatever ops.loads says it must be, and a run that stopped
between accepting a load and writing its keys leaves nothing wrong behind: the next check writes them.
A test compares it with its definition after every kind of change.
"""

from __future__ import annotations

import duckdb

from ledgerband.tasks.core.queries import run_query
from ledgerband.tasks.core.warehouse import transaction
from ledgerband.tasks.ingest.loads import accepted_ledger_loads


def sync(con: duckdb.DuckDBPyConnection) -> tuple[int, int]:
    """Bring ops.accepted_txn_ids in line with ops.loads; (loads whose keys were written, loads dropped)."""
    accepted = {load_id: quarantined for load_id, (_, quarantined) in accepted_ledger_loads(con).items()}
    held = dict(con.execute("select load_id, quarantined from ops.accepted_txn_id_loads").fetchall())
    stale = sorted(load_id for load_id, q in held.items() if accepted.get(load_id) != q)
    missing = sorted(load_id for load_id, q in accepted.items() if held.get(load_id) != q)
    if not stale and not missing:
        return 0, 0
    with transaction(con):
        if stale:
            con.execute(
                "delete from ops.accepted_txn_ids where load_id in (select unnest($loads))", {"loads": stale}
            )
            con.execute(
                "delete from ops.accepted_txn_id_loads where load_id in (select unnest($loads))",
                {"loads": stale},
            )
        if missing:
            run_query(con, "quality", "write_accepted_txn_ids", loads=missing)
            con.executemany(
                "insert into ops.accepted_txn_id_loads values (?, ?)", [[m, accepted[m]] for m in missing]
            )
    return len(missing), len([s for s in stale if s not in accepted])
