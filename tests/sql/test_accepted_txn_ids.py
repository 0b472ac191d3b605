"""tasks/quality/accepted_txn_ids.py: ops.accepted_txn_ids always equals its definition after every kind of change.

The reference is the definition itself, asked of raw.ledger_lines, ops.loads and the quarantine directly
(what the repeated-booking rule read before the key table existed); the table must never hold a txn_id
of a load that is not accepted, nor miss one of a load that is.
"""

from __future__ import annotations

from datetime import timedelta

from ledgerband.tasks.quality import accepted_txn_ids

from .test_transactions_refresh import T0, _load


def _held(con) -> list[tuple]:
    return con.execute("select txn_id, load_id from ops.accepted_txn_ids order by all").fetchall()


def _defined(con) -> list[tuple]:
    return con.execute(
        """
        select r.txn_id, r.load_id
        from raw.ledger_lines as r
        inner join ops.loads as l on l.load_id = r.load_id and l.dataset = 'ledger' and l.status = 'accepted'
        where r.txn_id is not null
            and not exists (
                select 1 from quarantine.ledger_lines as q
                where q.load_id = r.load_id and q.source_line = r.source_line
            )
        order by all
        """
    ).fetchall()


def test_the_key_table_follows_ops_loads_through_every_change(con):
    _load(con, "L1", T0, [("T1", 10), ("T2", 20)])
    assert accepted_txn_ids.sync(con) == (1, 0)
    assert _held(con) == _defined(con) == [("T1", "L1"), ("T2", "L1")]
    assert accepted_txn_ids.sync(con) == (0, 0)  # nothing changed: nothing written

    # A load validated but not accepted holds no keys; once accepted it does.
    _load(con, "L2", T0 + timedelta(days=30), [("T3", 30)], status="loaded")
    accepted_txn_ids.sync(con)
    assert _held(con) == _defined(con) and ("T3", "L2") not in _held(con)
    con.execute("update ops.loads set status = 'accepted' where load_id = 'L2'")
    assert accepted_txn_ids.sync(con) == (1, 0)
    assert ("T3", "L2") in _held(con) and _held(con) == _defined(con)

    # A record of a held load quarantined afterwards: its key goes.
    con.execute(
        "insert into quarantine.ledger_lines values ('L1', 'L1.csv', 2, ['some_rule'], 'x', null, ?)", [T0]
    )
    accepted_txn_ids.sync(con)
    assert _held(con) == _defined(con) and ("T1", "L1") not in _held(con)

    # A month restated: the old load's keys go, the corrected file's come.
    con.execute("update ops.loads set status = 'restated' where load_id = 'L1'")
    _load(con, "L1R", T0 + timedelta(days=40), [("T1", 11), ("T2", 20)])
    assert accepted_txn_ids.sync(con) == (1, 1)
    assert _held(con) == _defined(con) == [("T1", "L1R"), ("T2", "L1R"), ("T3", "L2")]

    # A warehouse whose key table was lost (or predates it): rebuilt whole from ops.loads.
    con.execute("delete from ops.accepted_txn_ids")
    con.execute("delete from ops.accepted_txn_id_loads")
    assert accepted_txn_ids.sync(con) == (2, 0)
    assert _held(con) == _defined(con)


def test_a_null_txn_id_holds_no_key(con):
    _load(con, "L1", T0, [("T1", 10)])
    con.execute("update raw.ledger_lines set txn_id = null")
    accepted_txn_ids.sync(con)
    assert _held(con) == _defined(con) == []
