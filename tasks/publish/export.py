"""Ad-hoc extracts for readers: one published month's tables as Parquet or CSV, from the readers' copy.

CSV is opened by spreadsheets, which run a cell starting with `=`, `+`, `-`, `@` (or a tab or carriage
return) as a formula. Every text cell that starts so is written with a leading apostrophe, the usual
defence against CSV formula injection (OWASP, "CSV Injection"); numbers are written as numbers.
"""

from __future__ import annotations

from pathlib import Path

import duckdb

from ledgerband.tasks.core.errors import LedgerbandError
from ledgerband.tasks.core.warehouse import sql_literal
from ledgerband.tasks.publish.readers_contract import HISTORY

TABLES = tuple(HISTORY)  # the readers' contract names the history tables once
FORMULA_START = "^[=+\\-@\\t\\r]"


def _safe_select(con: duckdb.DuckDBPyConnection, table: str) -> str:
    columns = con.execute(f"describe {table}").fetchall()
    parts = []
    for name, kind, *_ in columns:
        if kind.upper() == "VARCHAR":
            parts.append(
                f"case when regexp_matches({name}, '{FORMULA_START}') then '''' || {name} else {name} end as {name}"
            )
        else:
            parts.append(name)
    return ", ".join(parts)


def export_period(published: Path, period: str, fmt: str, target: Path) -> dict[str, Path]:
    """Write the period's latest published snapshot of each reader table to `target`; returns the files."""
    if fmt not in ("parquet", "csv"):
        raise LedgerbandError(f"export format must be parquet or csv, not {fmt!r}")
    if not published.exists():
        raise LedgerbandError(f"no published tables yet at {published}")
    con = duckdb.connect(str(published), read_only=True)
    try:
        found = con.execute(
            "select run_id from snapshots where period = ? order by published_at desc limit 1", [period]
        ).fetchall()
        if not found:
            raise LedgerbandError(f"{period} has no published snapshot in {published}")
        run_id = found[0][0]
        target.mkdir(parents=True, exist_ok=True)
        out = {}
        for table in TABLES:
            name = table.removesuffix("_history")
            path = target / f"{name}_{period}.{fmt}"
            columns = _safe_select(con, table) if fmt == "csv" else "*"
            # The run id is bound, never written into the SQL text (a temporary table of the rows).
            con.execute(
                f"create or replace temp table export_rows as select {columns} from {table} where run_id = ?",
                [run_id],
            )
            options = "format csv, header true" if fmt == "csv" else "format parquet"
            con.execute(f"copy export_rows to {sql_literal(path)} ({options})")
            out[name] = path
        return out
    finally:
        con.close()
