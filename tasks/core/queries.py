"""Named queries: the statements that read or write the warehouse but build no layer table.

Each lives in `warehouse/sql/queries/<area>/<name>.sql` (package data, read with importlib.resources like
the layer files), opens with the house header (Grain, Key, Reads, and `-- Parameters: $a, $b.` when it
takes any) and takes its values as DuckDB named parameters, bound at execution. Python loads a file by
name and binds what it uses; it never formats values into the text.

The layer folders (`sql/staging`, ...) are not touched here: `layer_models()` builds every file there.
"""

from __future__ import annotations

import re
from collections.abc import Mapping
from functools import cache
from importlib import resources
from typing import Any

import duckdb

from ledgerband.tasks.core.errors import LedgerbandError
from ledgerband.tasks.core.warehouse import PACKAGE

FOLDER = "queries"
# `$name` as DuckDB reads a named parameter. Comments and string literals are blanked first, so a `$` in
# a header line or a regular expression is not taken for one.
_PARAMETER = re.compile(r"\$([A-Za-z_][A-Za-z0-9_]*)")
_COMMENT_OR_TEXT = re.compile(r"--[^\n]*|'(?:[^']|'')*'")


def _node(area: str, name: str):
    return resources.files(PACKAGE) / "sql" / FOLDER / area / f"{name}.sql"


@cache
def query_text(area: str, name: str) -> str:
    """The text of `sql/queries/<area>/<name>.sql`, header included, without a trailing semicolon."""
    node = _node(area, name)
    if not node.is_file():
        raise LedgerbandError(f"no query file sql/{FOLDER}/{area}/{name}.sql in the package ({PACKAGE})")
    return node.read_text(encoding="utf-8").strip().rstrip(";")


def parameters(text: str) -> frozenset[str]:
    """The named parameters a SQL text uses (outside comments and string literals)."""
    return frozenset(_PARAMETER.findall(_COMMENT_OR_TEXT.sub(" ", text)))


def bind(area: str, name: str, values: Mapping[str, Any]) -> dict[str, Any]:
    """The values for exactly the parameters the file uses (DuckDB refuses a named parameter the text does
    not use). A parameter the file uses and `values` lacks is an error naming it and the file."""
    wanted = parameters(query_text(area, name))
    missing = sorted(wanted - set(values))
    if missing:
        raise LedgerbandError(
            f"sql/{FOLDER}/{area}/{name}.sql uses {', '.join('$' + m for m in missing)}, not given "
            f"(given: {', '.join(sorted(values)) or 'nothing'})"
        )
    return {k: values[k] for k in sorted(wanted)}


def run_query(
    con: duckdb.DuckDBPyConnection, area: str, name: str, **values: Any
) -> duckdb.DuckDBPyConnection:
    """Execute the file's statement with its parameters bound; fetch from the returned cursor."""
    return con.execute(query_text(area, name), bind(area, name, values))


def query_relation(
    con: duckdb.DuckDBPyConnection, area: str, name: str, **values: Any
) -> duckdb.DuckDBPyRelation:
    """The file's query as a lazy relation (its column types known before any row is read)."""
    return con.sql(query_text(area, name), params=bind(area, name, values))
