"""The DuckDB warehouse: connections, transactions, the schema and the layered SQL files.

SQL files ship inside the package (`ledgerband.warehouse`) and are read with importlib.resources, so an
installed wheel finds them without a checkout. Each layer file opens with a header that declares what it
builds from:

    -- Reads: staging.transactions, ref.business_calendar.
    -- Materialized: view            (optional; default: table)

The build order of the layers is derived from those declarations, never written down by hand.
"""

from __future__ import annotations

import graphlib
import re
import shutil
from collections.abc import Iterator, Mapping
from contextlib import contextmanager
from dataclasses import dataclass
from functools import cache
from importlib import resources
from pathlib import Path
from typing import Any

import duckdb

from ledgerband.tasks.core.errors import LedgerbandError
from ledgerband.tasks.core.settings import ScaleSettings
from ledgerband.tasks.ops.faults import checkpoint

PACKAGE = "ledgerband.warehouse"
# Layers built from SQL files by the feature stage, lowest first (published files are run by publish).
BUILT_LAYERS = ("staging", "intermediate", "features")
_READS = re.compile(r"^--\s*Reads:\s*(?P<names>[^\n]*)$", re.MULTILINE)
_MATERIALIZED = re.compile(r"^--\s*Materialized:\s*(?P<kind>table|view)\b", re.MULTILINE)
_MIGRATION = re.compile(r"(?P<version>\d{3})_(?P<name>[a-z0-9_]+)\.sql")
_PER_CUSTOMER = re.compile(r"^--\s*Scope:\s*per customer\b", re.MULTILINE)
_TABLE_NAME = re.compile(r"\b([a-z_]+)\.([a-z_]+)\b")


def duckdb_limits(scale: ScaleSettings | None) -> dict[str, Any]:
    """DuckDB configuration for scale.memory_limit and scale.threads (empty / 0: DuckDB's defaults)."""
    config: dict[str, Any] = {}
    if scale is not None and scale.memory_limit:
        config["memory_limit"] = scale.memory_limit
    if scale is not None and scale.threads:
        config["threads"] = scale.threads
    if scale is not None and scale.temp_directory:
        config["temp_directory"] = scale.temp_directory
    if scale is not None and scale.max_temp_size:
        config["max_temp_directory_size"] = scale.max_temp_size
    return config


_DISK_SIGNS = ("no space left on device", "max_temp_directory_size", "disk quota exceeded")


# The monthly flow's stage that builds the per-customer files bucket by bucket (its name in ops.runs).
FEATURES_STAGE = "features"


def resource_error(
    exc: BaseException, scale: ScaleSettings | None, warehouse: Path, stage: str | None = None
) -> LedgerbandError | None:
    """What to do when DuckDB ran out of memory or of spill space, as an error the operator can act on.

    None for any other exception. DuckDB's own messages suggest fewer threads or insertion order off;
    the settings that matter here are scale.memory_limit, scale.temp_directory and scale.max_temp_size,
    and, when the run's `stage` is the one that builds features per bucket, scale.bucket_customers.
    """
    if not isinstance(exc, duckdb.OutOfMemoryException | duckdb.IOException):
        return None
    first_line = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
    limit = (scale.memory_limit if scale else "") or "DuckDB's default (80% of memory)"
    spill = Path(scale.temp_directory) if scale and scale.temp_directory else Path(f"{warehouse}.tmp")
    if any(sign in str(exc).lower() for sign in _DISK_SIGNS):
        try:
            probe = spill if spill.exists() else spill.parent
            usage = shutil.disk_usage(probe)
            room = f"{usage.free / 2**30:.1f} GiB free of {usage.total / 2**30:.1f} GiB there now"
        except OSError:
            room = "free space unknown"
        cap = (scale.max_temp_size if scale else "") or "DuckDB's default, 90% of the free space"
        return LedgerbandError(
            f"the warehouse ran out of room to spill to disk ({first_line}). DuckDB spills what does not fit "
            f"scale.memory_limit = {limit} into {spill} ({room}; scale.max_temp_size = {cap}). Free space "
            "there, point scale.temp_directory at a larger disk, or raise scale.memory_limit "
            "(README, 'Bigger banks')."
        )
    if isinstance(exc, duckdb.OutOfMemoryException):
        buckets = (
            f", or lower scale.bucket_customers (now {scale.bucket_customers:,}): the {stage} stage builds "
            "the per-customer files one bucket of customers at a time"
            if stage == FEATURES_STAGE and scale
            else ""
        )
        where = f"in the {stage} stage " if stage else ""
        return LedgerbandError(
            f"the warehouse ran out of memory {where}({first_line}) under scale.memory_limit = {limit}: some "
            "work (a sort or join is spilled; a few aggregates cannot be) needed more than that. Raise "
            f"scale.memory_limit (LEDGERBAND_SCALE__MEMORY_LIMIT) within the machine's memory{buckets} "
            "(README, 'Bigger banks')."
        )
    return None


def connect(
    path: Path | str, read_only: bool = False, scale: ScaleSettings | None = None
) -> duckdb.DuckDBPyConnection:
    """Open the warehouse with extension auto-install off (the machine is offline), within `scale`'s limits."""
    path = Path(path)
    if not read_only:
        path.parent.mkdir(parents=True, exist_ok=True)
    config = {
        "autoinstall_known_extensions": False,
        "autoload_known_extensions": True,
        **duckdb_limits(scale),
    }
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
def open_warehouse(
    path: Path | str, scale: ScaleSettings | None = None
) -> Iterator[duckdb.DuckDBPyConnection]:
    con = connect(path, scale=scale)
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


def sql_literal(value: str | Path) -> str:
    """Text (a path, a comment) as a SQL string literal, single quotes doubled: for the few statements
    that cannot take a bound parameter (COPY ... TO, ATTACH, COMMENT ON, read_parquet of a glob)."""
    return "'" + str(value).replace("'", "''") + "'"


def columns_of(con: duckdb.DuckDBPyConnection, relation: str) -> list[str]:
    """The columns of `schema.table` in the connection's database, in order; empty when it does not exist."""
    schema, table = relation.split(".")
    rows = con.execute(
        "select column_name from duckdb_columns() where database_name = current_database() "
        "and schema_name = ? and table_name = ? order by column_index",
        [schema, table],
    ).fetchall()
    return [name for (name,) in rows]


def scalar(con: duckdb.DuckDBPyConnection, query: str, params: Any = None) -> Any:
    rows = con.execute(query, params).fetchall()
    return rows[0][0] if rows else None


@dataclass(frozen=True)
class SqlModel:
    """One layer file: `warehouse/sql/<layer>/<name>.sql` builds `<layer>.<name>`."""

    layer: str
    name: str
    query: str
    reads: tuple[str, ...]
    materialized: str  # 'table' | 'view'
    per_customer: bool = False  # '-- Scope: per customer': a customer's rows need only that customer's rows

    @property
    def relation(self) -> str:
        return f"{self.layer}.{self.name}"

    def params(self, available: Mapping[str, Any] | None) -> dict[str, Any]:
        """The parameters the file actually uses (DuckDB refuses unused named parameters)."""
        return {k: v for k, v in (available or {}).items() if f"${k}" in self.query}

    def build(self, con: duckdb.DuckDBPyConnection, params: Mapping[str, Any] | None = None) -> None:
        """Create or replace the table or view from the file's query (parameters bound, never formatted)."""
        if self.materialized == "view":
            if self.params(params) or "$" in self.query:
                raise LedgerbandError(f"{self.relation}: a view cannot take parameters")
            con.execute(f"create or replace view {self.relation} as\n{self.query}")
        else:
            con.execute(f"create or replace table {self.relation} as\n{self.query}", self.params(params))


def _resource(*parts: str):
    node = resources.files(PACKAGE)
    for part in parts:
        node = node / part
    return node


@cache
def sql_model(layer: str, name: str) -> SqlModel:
    node = _resource("sql", layer, f"{name}.sql")
    if not node.is_file():
        raise LedgerbandError(f"no SQL file for {layer}.{name} in the package (sql/{layer}/{name}.sql)")
    text = node.read_text(encoding="utf-8")
    reads_line = _READS.search(text)
    if not reads_line:
        raise LedgerbandError(f"sql/{layer}/{name}.sql: the header must declare '-- Reads: <tables>.'")
    names = reads_line.group("names")
    rest = text[reads_line.end() :].splitlines()[1:]
    while (
        not names.rstrip().endswith(".") and rest and rest[0].startswith("-- ")
    ):  # continued on the next line
        names += " " + rest.pop(0)[3:]
    reads = tuple(f"{a}.{b}" for a, b in _TABLE_NAME.findall(names))
    kind = _MATERIALIZED.search(text)
    return SqlModel(
        layer=layer,
        name=name,
        query=text.strip().rstrip(";"),
        reads=reads,
        materialized=kind.group("kind") if kind else "table",
        per_customer=bool(_PER_CUSTOMER.search(text)),
    )


def layer_models(layers: tuple[str, ...] = BUILT_LAYERS) -> list[SqlModel]:
    """Every SQL file of `layers`, in an order where each comes after everything it reads."""
    models = {}
    for layer in layers:
        folder = _resource("sql", layer)
        for node in sorted(folder.iterdir(), key=lambda n: n.name):
            if node.name.endswith(".sql"):
                model = sql_model(layer, node.name[: -len(".sql")])
                models[model.relation] = model
    graph = {rel: {r for r in m.reads if r in models} for rel, m in models.items()}
    try:
        order = list(graphlib.TopologicalSorter(graph).static_order())
    except graphlib.CycleError as exc:
        raise LedgerbandError(f"SQL layer files read each other in a cycle: {exc.args[1]}") from exc
    return [models[rel] for rel in order]


@dataclass(frozen=True)
class Migration:
    """`warehouse/migrations/<version>_<name>.sql`: brings a warehouse of an earlier version forward."""

    version: int
    name: str
    sql: str


def migrations() -> list[Migration]:
    """Every migration the package ships, in version order."""
    found = []
    for node in _resource("migrations").iterdir():
        match = _MIGRATION.fullmatch(node.name)
        if match:
            found.append(Migration(int(match["version"]), match["name"], node.read_text(encoding="utf-8")))
    return sorted(found, key=lambda m: m.version)


def _table_exists(con: duckdb.DuckDBPyConnection, relation: str) -> bool:
    return bool(columns_of(con, relation))


def apply_schema(con: duckdb.DuckDBPyConnection) -> list[int]:
    """Apply the schema: every schema and table in its final form (idempotent); bring a warehouse written by an
    earlier version to that form with the migrations it has not had; then the views the load stages read.
    Returns the versions of the migrations run (none for a new warehouse, which is born in final form).

    Each migration commits with its row in ops.schema_migrations, or not at all: a run killed during
    one finds the warehouse as it was and runs it again.
    """
    new_warehouse = not _table_exists(con, "ops.loads")
    con.execute(_resource("schema.sql").read_text(encoding="utf-8"))
    done = {v for (v,) in con.execute("select version from ops.schema_migrations").fetchall()}
    ran = []
    for migration in migrations():
        if migration.version in done:
            continue
        with transaction(con):
            if not new_warehouse:
                con.execute(migration.sql)
                ran.append(migration.version)
            con.execute(
                "insert into ops.schema_migrations values (?, ?, current_localtimestamp())",
                [migration.version, migration.name],
            )
    if ran:  # views keep the columns of the tables they were made on: make them again on the new tables
        con.execute(_resource("schema.sql").read_text(encoding="utf-8"))
    for model in layer_models():
        if model.materialized == "view":
            model.build(con)
    return ran


def build_layers(
    con: duckdb.DuckDBPyConnection,
    params: Mapping[str, Any],
    per_customer: bool | None = None,
    kept: frozenset[str] = frozenset(),
) -> dict[str, int]:
    """Rebuild the tables of the built layers in dependency order; returns row counts per table.

    per_customer None: every file; False: only the files built for all customers at once; True: only the
    per-customer files (ledgerband.tasks.layers.buckets runs those per bucket of customers). Tables in `kept`
    are brought up to date by their owner, not rebuilt here (their row counts are still returned).
    """
    counts = {}
    for model in layer_models():
        if per_customer is not None and model.per_customer != per_customer:
            continue
        if model.layer == "intermediate":
            checkpoint("mid_features")
        if model.relation not in kept:
            model.build(con, params)
        if model.materialized == "table":
            counts[model.relation] = int(scalar(con, f"select count(*)::bigint from {model.relation}"))
    return counts


def run_sql_file(
    con: duckdb.DuckDBPyConnection, layer: str, name: str, params: Mapping[str, Any] | None = None
) -> None:
    """Build one `<layer>.<name>` from its file (tests build single layers this way)."""
    sql_model(layer, name).build(con, params)
