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

from ledgerband.tasks.loads import accepted_ledger_loads
from ledgerband.tasks.warehouse import SqlModel, columns_of, sql_model, transaction

TABLE = "staging.transactions"

# The new loads' records (staging.ledger_transactions, the file's own input), minus txn_ids already held;
# a txn_id repeated among them keeps its first booking, as in the file. Shaped like the file: only the
# txn_ids held already or repeated are looked at twice, and `records` is not materialized (a CTE read
# more than once is, by default, and that copies every typed record of the new loads).
_APPEND = """
insert into staging.transactions
with

records as not materialized (
    select * from staging.ledger_transactions where load_id in (select unnest($new_loads))
),

held_again as (
    select records.txn_id
    from records
    semi join staging.transactions as held on held.txn_id is not distinct from records.txn_id
),

repeated as (
    select records.txn_id
    from records
    group by records.txn_id
    having count(*) > 1
),

first_bookings as (
    select records.*
    from records
    anti join held_again on records.txn_id is not distinct from held_again.txn_id
    anti join repeated on records.txn_id is not distinct from repeated.txn_id
    union all
    select records.*
    from records
    semi join repeated on records.txn_id is not distinct from repeated.txn_id
    anti join held_again on records.txn_id is not distinct from held_again.txn_id
    qualify
        row_number() over (
            partition by records.txn_id order by records.loaded_at, records.load_id, records.source_line
        ) = 1
)

select * exclude (loaded_at) from first_bookings
"""


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
    con.execute(
        "create table if not exists staging.transaction_loads "
        "(load_id varchar primary key, loaded_at timestamp not null, quarantined bigint not null)"
    )
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
            con.execute(_APPEND, {"new_loads": new})
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
