"""Compare what two runs produced: every table of the warehouse a run writes, and the report's text.

Used to prove a change that must not change behaviour (a refactor) leaves every published table, decision
and report figure as it was:

    python -m tests.bench.compare_runs dump  STATE_HOME  before.json
    python -m tests.bench.compare_runs diff  before.json after.json

`dump` reads the state folder's working warehouse (read-only) and the newest run report. Columns that
differ between any two runs by nature (run ids, timestamps, durations, paths, the software's own version
and checksums of saved model files) are left out; everything else is hashed row by row, sorted, so a
difference in a single value of a single row shows. The report is kept as text with run ids, dates and
timings masked.
"""

from __future__ import annotations

import json
import re
import sys
from pathlib import Path

import duckdb

SCHEMAS = ("staging", "intermediate", "features", "ml", "published", "quarantine", "ref", "raw")
# Columns whose values differ between runs of the same data: identities of the run, clocks, places.
VOLATILE = re.compile(
    r"(^|_)(run_id|run|at|seconds|duration|path|file_path|sha256|model_version|version|git_sha|host|pid"
    r"|snapshot_id|load_id|source_file|loaded|started|finished|created|published|landing)(_|$)"
)
UUID = r"[0-9a-f]{8}-[0-9a-f]{4}-[0-9a-f]{4}-[0-9a-f]{4}-[0-9a-f]{12}"
VERSION_RUN = r"(\d{4}-\d{2}\.[a-z_]+\.)[0-9a-f]{8}"  # model_version: period.champion.<run id's start>
MASKS = [
    (re.compile(r"\b\d{8}T\d{6}\b"), "<stamp>"),  # load ids start with their load time
    (
        re.compile(r"\b(image)?[mph]?[0-9a-f]{10}\b"),
        "<svg-id>",
    ),  # matplotlib's per-drawing marker, clip, hatch ids
    (re.compile(r'<td class="n">\d+\.\d+</td></tr>'), "<stage seconds>"),  # the run page's timings
    (re.compile(r"iVBORw0KGgo[A-Za-z0-9+/=]+"), "<png>"),  # an embedded PNG carries its creation time
    (re.compile(r"\b[0-9a-f]{8,}(-[0-9a-f]{4,})*\b"), "<id>"),
    (re.compile(r"\d{4}-\d{2}-\d{2}[T ]\d{2}:\d{2}(:\d{2}(\.\d+)?)?(\+\d{2}:?\d{2}|Z| UTC)?"), "<time>"),
    (re.compile(r"\b\d+(\.\d+)? ?(s|min|seconds|minutes|ms)\b"), "<dur>"),
    (re.compile(r"/(tmp|work|root)/[^\s\"'<]*"), "<path>"),
    (re.compile(r"run-[\w-]+"), "<run>"),
]


def _types(con, catalog, schema, table):
    return con.execute(
        "select column_name, data_type from information_schema.columns where table_catalog = ? and "
        "table_schema = ? and table_name = ? order by ordinal_position",
        [catalog, schema, table],
    ).fetchall()


def dump(home: Path, out: Path) -> None:
    con = duckdb.connect(str(home / "warehouse.duckdb"), read_only=True)
    # The readers' copy too: what readers open, views resolved into tables.
    con.execute(f"attach '{home / 'published' / 'ledgerband_published.duckdb'}' as readers (read_only)")
    tables = con.execute(
        "select table_schema, table_name, table_catalog from information_schema.tables where "
        f"(table_schema in ({', '.join('?' * len(SCHEMAS))}) and table_catalog = 'warehouse') "
        "or table_catalog = 'readers' order by all",
        list(SCHEMAS),
    ).fetchall()
    result: dict = {"tables": {}, "report": ""}
    for schema, table, catalog in tables:
        relation = f"{catalog}.{schema}.{table}"
        name = f"readers.{table}" if catalog == "readers" else f"{schema}.{table}"
        cols = [
            c
            for c, t in _types(con, catalog, schema, table)
            if not VOLATILE.search(c) and not t.startswith("TIMESTAMP")
        ]
        if not cols:
            continue
        types = dict(_types(con, catalog, schema, table))
        # Text names the state folder and run ids where a run mentions itself: masked, not compared.
        exprs = [
            f"regexp_replace(regexp_replace(regexp_replace(\"{c}\"::varchar, $home, '<home>', 'g'), "
            f"'{UUID}', '<id>', 'g'), '{VERSION_RUN}', '\\1<id>', 'g')"
            if types[c] in ("VARCHAR", "JSON")
            else f'"{c}"'
            for c in sorted(cols)  # by name: a column moved is not a change of content
        ]
        # Hashed in DuckDB (a 13M-row table does not fit in Python objects): the sum of every row's hash
        # is independent of row order and changes when any value of any row does; one sum per column
        # too, so a table that gained a column is still compared on the ones it kept.
        bind = {"home": str(home)} if any("$home" in e for e in exprs) else None
        sums = ", ".join(f"coalesce(sum(hash({e}))::hugeint, 0)::varchar" for e in [", ".join(exprs), *exprs])
        n, digest, *per_column = con.execute(  # relation names from the catalogue
            f"select count(*)::bigint, {sums} from {relation}", bind
        ).fetchall()[0]
        sample = con.execute(
            f"select {', '.join(exprs)} from {relation} order by all limit 3", bind
        ).fetchall()
        result["tables"][name] = {
            "columns": cols,
            "rows": n,
            "sha256": digest,
            "by_column": dict(zip(sorted(cols), per_column, strict=True)),
            "sample": [json.dumps(r, default=str) for r in sample],
        }
    con.close()
    # Every run report and validation page (index pages only link them), in run order.
    pages = sorted(
        (p for p in (home / "reports").rglob("*.html") if p.name != "index.html"),
        key=lambda p: p.stat().st_mtime,
    )
    text = "\n".join(p.read_text() for p in pages)
    for pattern, mask in MASKS:
        text = pattern.sub(mask, text)
    result["report"] = text
    out.write_text(json.dumps(result, indent=1))


def diff(a: Path, b: Path) -> int:
    x, y = json.loads(a.read_text()), json.loads(b.read_text())
    bad = 0
    for name in sorted(set(x["tables"]) | set(y["tables"])):
        tx, ty = x["tables"].get(name), y["tables"].get(name)
        if tx is None or ty is None:
            print(f"only in {'after' if tx is None else 'before'}: {name}")
            continue
        common = sorted(set(tx["columns"]) & set(ty["columns"]))
        if set(tx["columns"]) != set(ty["columns"]):
            print(
                f"{name}: columns differ: {sorted(set(tx['columns']) ^ set(ty['columns']))}; "
                f"the {len(common)} in both compared"
            )
        elif tx["columns"] != ty["columns"]:
            print(f"{name}: same columns, other order")
        changed = [c for c in common if tx["by_column"][c] != ty["by_column"][c]]
        same_rows = set(tx["columns"]) != set(ty["columns"]) or tx["sha256"] == ty["sha256"]
        if tx["rows"] != ty["rows"] or changed or not same_rows:
            print(f"{name}: {tx['rows']} rows -> {ty['rows']} rows, differs in {changed or 'row content'}")
            bad += 1
    if x["report"] != y["report"]:
        import difflib

        d = list(difflib.unified_diff(x["report"].splitlines(), y["report"].splitlines(), lineterm="", n=0))
        print(f"report differs ({len(d)} diff lines):")
        print("\n".join(d[:60]))
        bad += 1
    compared = len(set(x["tables"]) & set(y["tables"]))
    print(
        f"{compared} tables compared, {bad} differ; report {'same' if x['report'] == y['report'] else 'differs'}"
    )
    return 1 if bad else 0


if __name__ == "__main__":
    if sys.argv[1] == "dump":
        dump(Path(sys.argv[2]), Path(sys.argv[3]))
    else:
        sys.exit(diff(Path(sys.argv[2]), Path(sys.argv[3])))
