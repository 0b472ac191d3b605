"""The readers' contract: every published table and column, described once, here.

The descriptions become DuckDB comments (`COMMENT ON`) in the readers' copy, so a reader's tool shows
them; the README's table of published columns is generated from the same text (`ledgerband contract`),
and a test keeps the two equal.
"""

from __future__ import annotations

import duckdb

from ledgerband.tasks.core.warehouse import sql_literal

SUPPRESSION_NOTE = (
    "null when the cell has fewer than readers.min_cell_customers customers (statistical disclosure control)"
)

TABLES: dict[str, tuple[str, dict[str, str]]] = {
    "income_bands": (
        "Current snapshot: one row per customer of the reference file, with the income band it is published "
        "in. Internal reporting only; never a substitute for verified income.",
        {
            "run_id": "run that published the snapshot",
            "period": "month the snapshot describes, YYYY-MM",
            "customer_id": "pseudonymous customer key of the reference file",
            "income_band": "band code B1..Bn of income_band_scheme; bands are half-open: lower <= income < upper",
            "band_source": "observed_salary (net pay read from pay credits here), observed_pension, or "
            "model_estimate",
            "annual_income_estimate": "annual income the band is read from, in `currency`; observed amounts "
            "to the cent, model estimates rounded to intervals.round_to",
            "currency": "ISO 4217 code of every amount in the row",
            "estimate_low": "lower bound of the model estimate's conformal interval at intervals.level, "
            "rounded down; null for observed amounts",
            "estimate_high": "upper bound of that interval, rounded up; null for observed amounts",
            "band_confidence": "share (0 to 1) of the interval inside the published band; null for observed "
            "amounts",
            "model_version": "model that estimated the snapshot (period.champion.run)",
            "published_at": "when the snapshot was published (local time of the pipeline)",
        },
    ),
    "band_summary": (
        "Current snapshot: customers per income band, home region and band source. Small cells suppressed.",
        {
            "run_id": "run that published the snapshot",
            "period": "month, YYYY-MM",
            "income_band": "band code of income_band_scheme (half-open bounds)",
            "home_region": "customer's home region from the reference file ('unknown' when missing)",
            "band_source": "observed_salary, observed_pension or model_estimate",
            "customer_count": f"customers in the cell; {SUPPRESSION_NOTE}",
            "suppressed": "true when customer_count is withheld as a small cell",
        },
    ),
    "band_movers": (
        "Current snapshot: customers by band in the previous published month and band now, by band source "
        "now. Customers new or gone since then are counted with from_band or to_band 'none'.",
        {
            "run_id": "run that published the snapshot",
            "period": "month, YYYY-MM",
            "previous_period": "the earlier published month compared with, YYYY-MM",
            "from_band": "band code in the previous month's snapshot, or 'none'",
            "to_band": "band code now, or 'none'",
            "band_source": "band source now (observed_salary, observed_pension, model_estimate) or 'none'",
            "customer_count": f"customers who moved so; {SUPPRESSION_NOTE}",
            "suppressed": "true when customer_count is withheld as a small cell",
        },
    ),
    "income_band_scheme": (
        "The band scheme of the current snapshot: one row per band.",
        {
            "band_index": "0-based order of the band",
            "income_band": "band code B1..Bn",
            "lower_bound": "inclusive lower bound of annual income (null for the first band)",
            "upper_bound": "exclusive upper bound of annual income (null for the last band)",
            "band_label": "readable range with its currency",
        },
    ),
    "snapshots": (
        "Every publish: one row per snapshot; is_current marks the one the current tables show.",
        {
            "run_id": "run that published the snapshot",
            "period": "month, YYYY-MM",
            "model_version": "model of the snapshot",
            "band_edges": "JSON list of the band edges used",
            "customer_count": "customers in the snapshot",
            "is_current": "true for the snapshot the current tables show (never an older month's)",
            "published_at": "when it was published",
        },
    ),
    "decisions": (
        "Every gate decision of every run, with the figures and thresholds behind it.",
        {
            "run_id": "run",
            "period": "month, YYYY-MM",
            "gate": "quality, labels, accuracy or drift",
            "decision": "pass, warn or stop",
            "reason": "the decision in words: figure, threshold, and what would change it",
            "figures": "JSON of every figure measured",
            "thresholds": "JSON of the thresholds applied",
            "decided_at": "when",
            "check_name": "the gate's check (e.g. quarantine_share, accuracy, population_shift, drift)",
            "subject": "what was checked: an extract's file name, or run",
        },
    ),
}
# History by period beside the current tables: same columns, every published snapshot.
HISTORY = {
    "income_bands_history": "income_bands",
    "band_summary_history": "band_summary",
    "band_movers_history": "band_movers",
}


def describe(name: str) -> tuple[str, dict[str, str]]:
    if name in HISTORY:
        current = HISTORY[name]
        table, columns = TABLES[current]
        rows = table.split(": ", 1)[-1]
        return f"Every published snapshot, by period; same columns as {current}. Rows: {rows}", columns
    return TABLES[name]


def apply_comments(con: duckdb.DuckDBPyConnection, catalog: str) -> None:
    """COMMENT ON every described table and column of the attached database `catalog`."""
    tables = [
        t
        for (t,) in con.execute(
            "select table_name from duckdb_tables() where database_name = ?", [catalog]
        ).fetchall()
    ]
    for table in tables:
        if table not in TABLES and table not in HISTORY:
            continue
        comment, columns = describe(table)
        con.execute(f"comment on table {catalog}.main.{table} is {sql_literal(comment)}")
        present = {
            c
            for (c,) in con.execute(
                "select column_name from duckdb_columns() where database_name = ? and table_name = ?",
                [catalog, table],
            ).fetchall()
        }
        missing = sorted(present - set(columns))
        if missing:
            raise ValueError(
                f"published table {table} has undescribed columns {missing}: describe them in tasks/publish/readers_contract.py"
            )
        for column in present:
            con.execute(
                f"comment on column {catalog}.main.{table}.{column} is {sql_literal(columns[column])}"
            )


def markdown(con: duckdb.DuckDBPyConnection, catalog: str) -> str:
    """The README's table of published tables, read back from the comments in `catalog`."""
    rows = ["| table | what it holds | columns |", "|---|---|---|"]
    tables = con.execute(
        "select table_name, comment from duckdb_tables() where database_name = ? order by table_name",
        [catalog],
    ).fetchall()
    for table, comment in tables:
        columns = con.execute(
            "select column_name, comment from duckdb_columns() where database_name = ? and table_name = ? "
            "order by column_index",
            [catalog, table],
        ).fetchall()
        cells = "; ".join(f"`{c}`: {text}" for c, text in columns)
        rows.append(f"| `{table}` | {comment} | {cells} |")
    return "\n".join(rows)
