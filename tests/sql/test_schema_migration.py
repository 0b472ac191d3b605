"""A warehouse written by an earlier version opens and is brought to the schema a new one is born with.

tests/fixtures/warehouse/schema-2026-12-05.sql is warehouse/schema.sql as it stood on 2026-12-05 (commit
a1f6da2), when tables still grew by `alter table ... add column`: the schema of every warehouse in use
that day. After apply_schema, such a warehouse must have exactly the tables, columns, types and column
order of a new one, keep every row, and never run a migration twice.
"""

from __future__ import annotations

from datetime import datetime
from importlib import resources
from pathlib import Path

import duckdb
import pytest

from ledgerband.tasks.core.warehouse import apply_schema, migrations

OLD_SCHEMA = Path(__file__).parents[1] / "fixtures" / "warehouse" / "schema-2026-12-05.sql"
SCHEMAS = ("raw", "quarantine", "ml", "published", "ops", "ref")


def _catalogue(con, kinds=("BASE TABLE", "VIEW")) -> list[tuple]:
    return con.execute(
        "select c.table_schema, c.table_name, c.ordinal_position, c.column_name, c.data_type, c.is_nullable "
        "from information_schema.columns as c inner join information_schema.tables as t "
        "using (table_catalog, table_schema, table_name) where c.table_schema in ('raw', 'quarantine', "
        "'ml', 'published', 'ops', 'ref') and list_contains(?, t.table_type) order by all",
        [list(kinds)],
    ).fetchall()


@pytest.fixture
def old():
    """A warehouse as the code of 2026-12-05 left it, with a published snapshot and its predictions."""
    con = duckdb.connect()
    con.execute(OLD_SCHEMA.read_text())
    when = datetime(2026, 11, 3, 6, 0)
    con.execute(
        "insert into ml.predictions (run_id, customer_id, estimate, annual_salary, observed_pension, "
        "income_value, band_index) values ('r1', 'C1', 1.0, 41000, null, 41000, 1), "
        "('r1', 'C2', 1.0, null, 12000, 12000, 0), ('r1', 'C3', 33000.4, null, null, 33000, 1)"
    )
    con.execute(
        "insert into published.snapshots values ('r1', '2026-10', 'm', '[25000]', 3, true, ?)", [when]
    )
    con.execute(
        "insert into published.income_bands_history by name select 'r1' as run_id, '2026-10' as period, "
        "'C3' as customer_id, 'B2' as income_band, 'model_estimate' as band_source, "
        "33000.00 as annual_income_estimate, 'm' as model_version, ? as published_at, 'EUR' as currency, "
        "31000.00 as estimate_low, 35000.00 as estimate_high, 1.00 as band_confidence",
        [when],
    )
    yield con
    con.close()


def test_an_old_warehouse_gets_the_tables_a_new_one_is_born_with(old):
    new = duckdb.connect()
    assert apply_schema(new) == []  # born in final form: no migration runs
    assert apply_schema(old) == [m.version for m in migrations()]
    assert _catalogue(old) == _catalogue(new)


def test_rows_survive_and_band_source_is_filled_by_the_rule_of_the_time(old):
    apply_schema(old)
    assert old.execute("select customer_id, band_source from ml.predictions order by 1").fetchall() == [
        ("C1", "observed_salary"),
        ("C2", "observed_pension"),
        ("C3", "model_estimate"),
    ]
    row = old.execute("select * from published.income_bands").fetchall()
    assert row == old.execute("select * from published.income_bands_history").fetchall()
    assert row[0][:7] == ("r1", "2026-10", "C3", "B2", "model_estimate", 33000, "EUR")


def test_the_current_view_and_its_history_show_one_column_order(old):
    apply_schema(old)
    from ledgerband.tasks.publish.readers_contract import TABLES

    for con in (old, duckdb.connect()):
        apply_schema(con)
        for table in ("income_bands", "band_summary", "band_movers"):
            view = [c for (c, *_) in con.execute(f"describe published.{table}").fetchall()]
            history = [c for (c, *_) in con.execute(f"describe published.{table}_history").fetchall()]
            assert view == history == list(TABLES[table][1]), table


def test_a_migration_runs_once(old):
    apply_schema(old)
    assert apply_schema(old) == []
    assert old.execute("select count(*) from ops.schema_migrations").fetchall() == [(len(migrations()),)]


def test_a_migration_that_fails_leaves_the_warehouse_as_it_was(old, monkeypatch):
    from ledgerband.tasks.core import warehouse

    # ref.pay_frequencies is rewritten from settings by schema.sql itself on every run, not by migrations
    before = _catalogue(old, ("BASE TABLE",))
    broken = [
        warehouse.Migration(1, "broken", "alter table ml.predictions add column x double; select nope;")
    ]
    monkeypatch.setattr(warehouse, "migrations", lambda: broken)
    with pytest.raises(duckdb.Error):
        apply_schema(old)
    # schema.sql (run before the migrations, outside their transaction) creates the tables new since the old
    # version, empty; every table that was there must be as it was.
    existed = {(r[0], r[1]) for r in before}
    after = [
        r
        for r in _catalogue(old, ("BASE TABLE",))
        if r[1] not in ("schema_migrations", "pay_frequencies") and (r[0], r[1]) in existed
    ]
    assert after == [r for r in before if r[1] not in ("schema_migrations", "pay_frequencies")]
    new_tables = (
        {(r[0], r[1]) for r in _catalogue(old, ("BASE TABLE",))} - existed - {("ops", "schema_migrations")}
    )
    assert new_tables == {
        ("raw", "verified_incomes"),
        ("quarantine", "verified_incomes"),
        ("ops", "verified_income_runs"),
    }
    for schema, table in new_tables:
        assert old.execute(f"select count(*) from {schema}.{table}").fetchall() == [(0,)]
    assert old.execute("select count(*) from ops.schema_migrations").fetchall() == [(0,)]


def test_schema_sql_declares_tables_whole():
    text = (resources.files("ledgerband.warehouse") / "schema.sql").read_text()
    assert "alter table" not in text.lower(), (
        "schema.sql holds final tables; a change goes in a migration too"
    )
