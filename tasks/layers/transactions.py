"""staging.transactions kept up to date by appending new loads, rebuilt whole only when history changed.

The table's definition is its SQL file (`warehouse/sql/staging/transactions.sql`: each txn_id's first
booking among the records of accepted loads that were not quarantined). Rebuilding it every month
re-reads every month ever loaded, so its cost grows with the history (at 100k customers x 4 months it
was the largest part of the feature stage). `staging.transaction_loads` records which loads the table
holds, with each load's quarantined count at the time. When the accepted loads are exactly those plus
new ones loaded later, and no held load's quarantine changed, the new loads' records are appended
(minus txn_ids the table already holds: the earlier booking is the first). Anything else (a restated
month, a load no longer accepted, a record quarantined afterwards, a new load older than a held one, a
missing table) rebuilds the table from its file. Either way the result is what the file defines: a test
compares the two after every kind of change.
"""

from __future__ import annotations

import duckdb

from ledgerband.tasks.core.errors import LedgerbandError
from ledgerband.tasks.core.queries import run_query
from ledgerband.tasks.core.warehouse import SqlModel, columns_of, sql_model, transaction
from ledgerband.tasks.ingest.loads import accepted_ledger_loads

TABLE = "staging.transactions"

# The file reads `records` from this query; an append reads, in its place, only the new loads' records
# whose txn_id the table does not hold yet (the earlier booking is the first). The rest of the file
# (a txn_id repeated among them keeps its first booking) is the same text both ways. These two are the
# one piece of SQL kept here: fragments of the file, not statements. A second file for the append would
# restate the first-booking logic; a relation the append points at new loads would make the file's
# meaning depend on session state, and the file is the reference the kept table is tested against.
_RECORDS = "records as not materialized (\n    select * from staging.ledger_transactions\n)"
_NEW_RECORDS = """records as not materialized (
    select new.*
    from staging.ledger_transactions as new
    anti join temp.held_again on new.txn_id is not distinct from held_again.txn_id
    where new.load_id in (select unnest($new_loads))
)"""


def append_query(model: SqlModel) -> str:
    """The file's query reading only the new loads' records (after `transactions_held_again` has run)."""
    if model.query.count(_RECORDS) != 1:
        raise LedgerbandError(
            f"sql/staging/transactions.sql must define `records` once as {_RECORDS!r}: the monthly append "
            "reads the new loads through the same file in its place"
        )
    return model.query.replace(_RECORDS, _NEW_RECORDS)


def _append(con: duckdb.DuckDBPyConnection, model: SqlModel, new: list[str]) -> None:
    run_query(con, "layers", "transactions_held_again", new_loads=new).fetchall()
    con.execute(f"insert into {TABLE}\n{append_query(model)}", {"new_loads": new}).fetchall()
    con.execute("drop table temp.held_again").fetchall()


def _why_rebuild(
    con: duckdb.DuckDBPyConnection,
    accepted: dict[str, tuple],
    held: dict[str, tuple],
    new: list[str],
) -> str | None:
    """Why the table cannot be appended to (None when it can): the first reason found, naming the load."""
    if not columns_of(con, TABLE):
        return "no table yet"
    if not held:
        return "no loads recorded as held"
    for load_id, (_, quarantined) in sorted(held.items()):
        if load_id not in accepted:
            return f"held load {load_id} is no longer accepted"
        if accepted[load_id][1] != quarantined:
            return f"held load {load_id} has {accepted[load_id][1]} records quarantined, {quarantined} when staged"
        if accepted[load_id][0] != held[load_id][0]:
            return f"held load {load_id} has another load time"
    newest = max(at for at, _ in held.values())
    for n in new:
        if accepted[n][0] <= newest:
            return f"new load {n} is older than a held one"
    return None


def refresh_transactions(con: duckdb.DuckDBPyConnection, model: SqlModel | None = None) -> str:
    """Bring staging.transactions up to date: 'appended N', 'unchanged' or 'rebuilt: <why>'."""
    model = model or sql_model("staging", "transactions")
    run_query(con, "layers", "create_transaction_loads")
    accepted = accepted_ledger_loads(con)
    held = {
        r[0]: (r[1], r[2])
        for r in con.execute(
            "select load_id, loaded_at, quarantined from staging.transaction_loads"
        ).fetchall()
    }
    new = sorted(set(accepted) - set(held))
    why = _why_rebuild(con, accepted, held, new)
    with transaction(con):
        if why is None and not new:
            return "unchanged"
        if why is None:
            _append(con, model, new)
            outcome = f"appended {len(new)}"
        else:
            model.build(con)
            con.execute("delete from staging.transaction_loads")
            new = sorted(accepted)
            outcome = f"rebuilt: {why}"
        con.executemany(
            "insert into staging.transaction_loads values (?, ?, ?)",
            [[n, accepted[n][0], accepted[n][1]] for n in new],
        )
    return outcome
