"""No SQL text is built by formatting anything but identifiers the code itself controls.

Values always travel as bound parameters (`?`, `$name`). The scan below finds every call of
`.execute/.sql/.query` whose SQL is an f-string, a `.format()` or a `+`/`%` expression, and compares what
is formatted in with the reviewed list: each entry says where the formatted parts come from. A new
formatted SQL text fails this test until it is reviewed and listed here (with its reason).
"""

from __future__ import annotations

import ast
from pathlib import Path

ROOT = Path(__file__).parents[2]
SQL_CALLS = {"execute", "executemany", "sql", "query"}

# (file, formatted expressions) -> why they cannot carry outside input.
REVIEWED = {
    (
        "tasks/layers/buckets.py",
        ("relation", "columns"),
    ): "relation from the layer files' Reads headers (our own "
    "package files); columns is a path made a literal by sql_literal",
    (
        "tasks/layers/buckets.py",
        ("BUCKET_OF.format(n=int(n))", "relation", "sql_literal(target)"),
    ): "BUCKET_OF is a constant with an int; relation and the path as above",
    ("tasks/layers/buckets.py", ("relation", "sql_literal(f'{target}.parquet')")): "as above",
    ("tasks/layers/buckets.py", ("schema",)): "the schema part of a relation from our Reads headers",
    (
        "tasks/layers/buckets.py",
        ("relation", "files"),
    ): "relation as above; files a path made a literal by sql_literal",
    ("tasks/layers/buckets.py", ("model.layer",)): "the folder name of one of our package's SQL files",
    (
        "tasks/layers/buckets.py",
        ("model.relation", "target"),
    ): "our SQL file's relation; target made a literal by sql_literal",
    (
        "tasks/layers/buckets.py",
        ("model.relation", "files"),
    ): "our SQL file's relation; files made literals by sql_literal",
    (
        "tasks/layers/transactions.py",
        ("TABLE", "append_query(model)"),
    ): "TABLE is a constant; the query is our package's "
    "SQL file with one constant CTE put in place of another (values bound as $new_loads)",
    (
        "tasks/publish/readers_contract.py",
        ("catalog", "table", "sql_literal(comment)"),
    ): "catalog is our attach name; table is checked "
    "against contract.TABLES/HISTORY just above; the comment is our text, quoted by warehouse.sql_literal",
    (
        "tasks/publish/readers_contract.py",
        ("catalog", "table", "column", "sql_literal(columns[column])"),
    ): "as above; column read "
    "from duckdb_columns() of our own table and checked against the contract's column list",
    (
        "tasks/publish/export.py",
        ("table",),
    ): "table is one of publish.READER_TABLES (validated by the export command)",
    (
        "tasks/publish/export.py",
        ("columns", "table"),
    ): "columns from `describe` of that table, table as above",
    (
        "tasks/publish/export.py",
        ("sql_literal(path)", "options"),
    ): "path made a literal by warehouse.sql_literal (single quotes doubled); options from a fixed dict keyed by the format enum",
    (
        "tasks/ingest/extracts.py",
        ("target", "cols", "cols"),
    ): "target is 'raw.ledger_lines' or 'raw.customers' (literals at "
    "the call sites); cols from contract.LEDGER_COLUMNS/CUSTOMER_COLUMNS",
    ("tasks/ingest/loads.py", ("table",)): "a literal tuple of three table names",
    (
        "tasks/publish/snapshot.py",
        ("table", "model.query"),
    ): "table a literal at the call site; query read from a packaged SQL file",
    (
        "tasks/publish/snapshot.py",
        ("sql_literal(tmp)",),
    ): "a path under the state folder, made a literal by sql_literal",
    ("tasks/publish/snapshot.py", ("READER_TABLES[history]",)): "a query from the module's own dict",
    ("tasks/publish/snapshot.py", ("table",)): "a literal at the call site",
    ("tasks/publish/snapshot.py", ("name", "query")): "READER_TABLES' own keys and queries",
    (
        "tasks/publish/snapshot.py",
        ("sql_literal(staging / name)",),
    ): "a path under the state folder, quotes doubled",
    (
        "tasks/publish/snapshot.py",
        ("columns", "table") * 4,
    ): "table from publish.HISTORY_TABLES, the module's own "
    "tuple; columns read from information_schema for that table, each double-quoted",
    ("tasks/publish/snapshot.py", ("measure",)): "one of two literal column names chosen just above",
    (
        "tasks/publish/snapshot.py",
        ("measure", "sql_literal(f'{part}/*.parquet')"),
    ): "as above; path quotes doubled",
    (
        "tasks/quality/pushdown.py",
        ("carried", "flags", "query"),
    ): "carried: helper column names from validate's own "
    "_NAMES_A_FIELD, double-quoted; flags: predicates built by pushdown.predicate from suite rules whose column "
    "names pass translatable() (an identifier pattern and present in the query), values bound as $regex_i, "
    "$set_i, $min_i, $max_i; query: the packaged file sql/queries/quality/ledger_checks.sql",
    (
        "tasks/quality/pushdown.py",
        ("tallies", "checks"),
    ): "generated names m0.., u0.. only; checks: 'rule_checks', or it "
    "joined with repeated_i tables on k_i columns (i an int index)",
    (
        "tasks/quality/pushdown.py",
        ("carried", "marks", "checks", "broken_any"),
    ): "carried as above; generated names u0.. only; checks as above",
    (
        "tasks/quality/pushdown.py",
        ("i", "i", "i", "i"),
    ): "i: a uniqueness rule's int index (temp table repeated_i)",
    ("tasks/quality/pushdown.py", ("i",)): "as above",
    ("tasks/modeling/train.py", ("table",)): "train.ML_TABLES, the module's own tuple",
    (
        "tasks/quality/validate.py",
        ("column",),
    ): "the suite's column name, checked against the contract's columns by "
    "read_suite's caller (a packaged suite)",
    (
        "tasks/core/warehouse.py",
        ("self.relation", "self.query"),
    ): "relation from the packaged SQL file's path (layer/name); query is that file's text",
}


def _formatted_sql_calls():
    for path in sorted([*ROOT.joinpath("tasks").rglob("*.py"), *ROOT.joinpath("flows").rglob("*.py")]):
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for node in ast.walk(tree):
            if not (isinstance(node, ast.Call) and isinstance(node.func, ast.Attribute)):
                continue
            target = node.func.value
            if (
                node.func.attr == "format"
                and isinstance(target, ast.Name)
                and target.id.endswith(("QUERY", "SQL"))
            ):
                # a SQL template constant filled in before it is executed
                yield str(path.relative_to(ROOT)), node.lineno, tuple(ast.unparse(k) for k in node.keywords)
                continue
            if node.func.attr not in SQL_CALLS or not node.args:
                continue
            sql = node.args[0]
            if isinstance(sql, ast.JoinedStr):
                parts = tuple(ast.unparse(v.value) for v in sql.values if isinstance(v, ast.FormattedValue))
            elif (
                isinstance(sql, ast.Call)
                and isinstance(sql.func, ast.Attribute)
                and sql.func.attr == "format"
            ):
                parts = tuple(ast.unparse(a) for a in [*sql.args, *sql.keywords])
            elif isinstance(sql, ast.BinOp):
                parts = (ast.unparse(sql),)
            else:
                continue
            yield str(path.relative_to(ROOT)), node.lineno, parts


def test_every_formatted_sql_text_is_reviewed():
    unreviewed = [
        f"{file}:{line} formats {parts}"
        for file, line, parts in _formatted_sql_calls()
        if (file, parts) not in REVIEWED
    ]
    assert not unreviewed, "SQL text built by formatting, not reviewed:\n" + "\n".join(unreviewed)


def test_the_scan_finds_what_it_looks_for(tmp_path):
    # The scan is not vacuous: the reviewed list is matched by real call sites.
    found = {(file, parts) for file, _, parts in _formatted_sql_calls()}
    assert found == set(REVIEWED), set(REVIEWED) ^ found
