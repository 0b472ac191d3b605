"""The DuckDB warehouse: connections, the schema, layered SQL files, and period arithmetic."""

from __future__ import annotations

import calendar
import re
from collections.abc import Iterator, Mapping
from contextlib import contextmanager
from dataclasses import dataclass
from datetime import date
from pathlib import Path
from typing import Any

import duckdb

from tasks.errors import LedgerbandError

WAREHOUSE_DIR = Path(__file__).resolve().parents[1] / "warehouse"
SQL_DIR = WAREHOUSE_DIR / "sql"
_PERIOD = re.compile(r"^(\d{4})-(0[1-9]|1[0-2])$")


@dataclass(frozen=True)
class Period:
    """A calendar month, written YYYY-MM."""

    year: int
    month: int

    @classmethod
    def parse(cls, text: str) -> Period:
        m = _PERIOD.match(text or "")
        if not m:
            raise LedgerbandError(f"period {text!r} is not a month written YYYY-MM (e.g. 2026-10)")
        return cls(int(m.group(1)), int(m.group(2)))

    def __str__(self) -> str:
        return f"{self.year:04d}-{self.month:02d}"

    @property
    def start(self) -> date:
        return date(self.year, self.month, 1)

    @property
    def end(self) -> date:
        return date(self.year, self.month, calendar.monthrange(self.year, self.month)[1])

    def shift(self, months: int) -> Period:
        index = self.year * 12 + (self.month - 1) + months
        return Period(index // 12, index % 12 + 1)

    def window(self, months: int) -> list[Period]:
        """The `months` periods ending with this one, oldest first."""
        return [self.shift(-k) for k in range(months - 1, -1, -1)]


def connect(path: Path | str, read_only: bool = False) -> duckdb.DuckDBPyConnection:
    """Open the warehouse with extension auto-install off (the machine is offline)."""
    path = Path(path)
    if not read_only:
        path.parent.mkdir(parents=True, exist_ok=True)
    config = {"autoinstall_known_extensions": False, "autoload_known_extensions": True}
    try:
        return duckdb.connect(str(path), read_only=read_only, config=config)
    except duckdb.IOException as exc:
        if "lock" in str(exc).lower():
            raise LedgerbandError(
                f"warehouse {path} is in use by another process (is another run in progress?); DuckDB allows one "
                f"writer and no other reader. Readers use the published copy instead. ({exc})"
            ) from exc
        raise


@contextmanager
def open_warehouse(path: Path | str) -> Iterator[duckdb.DuckDBPyConnection]:
    con = connect(path)
    try:
        yield con
    finally:
        con.close()


@contextmanager
def transaction(con: duckdb.DuckDBPyConnection) -> Iterator[duckdb.DuckDBPyConnection]:
    """BEGIN … COMMIT; any exception rolls everything back and propagates."""
    con.execute("begin transaction")
    try:
        yield con
    except BaseException:
        con.execute("rollback")
        raise
    con.execute("commit")


def apply_schema(con: duckdb.DuckDBPyConnection) -> None:
    con.execute((WAREHOUSE_DIR / "schema.sql").read_text())


def sql_file(layer: str, name: str) -> Path:
    path = SQL_DIR / layer / f"{name}.sql"
    if not path.is_file():
        raise FileNotFoundError(f"no SQL file for {layer}.{name} at {path}")
    return path


def run_sql_file(
    con: duckdb.DuckDBPyConnection, layer: str, name: str, params: Mapping[str, Any] | None = None
) -> None:
    """Build `<layer>.<name>` from `warehouse/sql/<layer>/<name>.sql` (parameters bound, not formatted).

    The file holds a query (`select * from final`); this wraps it in `create or replace table`.
    """
    con.execute(
        f"create or replace table {layer}.{name} as\n{read_query(layer, name)}", bound(layer, name, params)
    )


def read_query(layer: str, name: str) -> str:
    """The query in `warehouse/sql/<layer>/<name>.sql`, without a trailing semicolon."""
    return sql_file(layer, name).read_text().strip().rstrip(";")


def bound(layer: str, name: str, params: Mapping[str, Any] | None) -> dict[str, Any]:
    """The parameters the file actually uses (DuckDB refuses unused named parameters)."""
    query = read_query(layer, name)
    return {k: v for k, v in (params or {}).items() if f"${k}" in query}


def scalar(con: duckdb.DuckDBPyConnection, query: str, params: Any = None) -> Any:
    rows = con.execute(query, params).fetchall()
    return rows[0][0] if rows else None
