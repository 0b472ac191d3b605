"""Benchmark: the monthly flow at bank sizes, beside DuckDB doing the plain work on the same files.

Run with `make bench` (never in the default run). BENCH_SIZES (default "10000,100000"; add 1000000 to
try a million customers) lists the customer counts; BENCH_MONTHS (default 4, the load window of the
default settings: fewer and the run stops for a missing month) the months.

- The demo extracts are generated once per size and kept under `bench/cache/` (git-ignored). A size
  above 100,000 that is a multiple of it is made of renamed copies of the 100,000-customer bank
  (`_tiled`): the generator holds every posting in Python and would need about an hour and more memory
  than this machine has for a million customers. Each copy's customers, accounts and txn_ids are new;
  employers and merchants are shared (ten times the staff each), which the pipeline's work does not
  depend on. The result JSON says so (`extracts`).
- The flow runs in its own process (`ledgerband run`, with its own temporary Prefect server), so its
  peak memory is its own: each stage's from ops.runs (VmHWM, reset per stage), the whole run's the
  highest VmHWM read from /proc while it runs (every 50 ms) and any stage's. Not wait4(2)'s ru_maxrss:
  Linux gives an exec'd child the high-water mark of the memory it was forked from, so a flow started
  by a harness that had just generated the 100k bank in Python (~10 GB) read as 9.5 GB. Training runs
  on worker processes (train.n_jobs), whose memory is their own: the table's "with its child processes"
  row is the peak of the summed resident memory of the flow and every process under it. The process's
  wall time includes Python's imports and the start of its temporary Prefect server (~15 s, a fresh
  Prefect database each time); "of it the run" is the run's own time in ops.runs, as a scheduled run
  against a running Prefect server would take.
- Two kinds of run. A first run (every size in BENCH_SIZES): the whole load window arrives at once.
  A monthly run (every size in BENCH_MONTHLY, default 100000; empty to skip), the scheduled case: a
  run a month before (not measured) has loaded the window's earlier months, and one new month
  arrives. Its reference load is of the new month (what ingest and validate read), its reference
  aggregate over the window (what the features cover).
- In the same run, on the same files: DuckDB scanning the extracts, loading them into a table, and one
  plain per-customer aggregate (the reference figures); each stage's ratio to them.
- One JSON file per run under `bench/results/` (machine facts included), and a printed table.
"""

from __future__ import annotations

import json
import os
import platform
import subprocess
import time
from datetime import datetime
from decimal import Decimal
from pathlib import Path

import duckdb

from ledgerband.tasks.core.period import Period
from tests.monthly_cli import isolated_env, run_command

ROOT = Path(__file__).parents[2]
BENCH = ROOT / "bench"
END_PERIOD = "2026-10"
# The reference aggregate: one pass, seven per-customer figures, over the loaded table.
PLAIN_AGGREGATE = """
select customer_id,
    count(*) as postings,
    sum(amount) filter (where direction = 'CRDT') as credits,
    sum(amount) filter (where direction = 'DBIT') as debits,
    max(amount) filter (where direction = 'DBIT') as largest_debit,
    count(distinct booking_date) as active_days,
    count(distinct merchant_category) as categories,
    max(balance_after) as top_balance
from plain
group by customer_id
"""


def _machine() -> dict:
    memory_kb = next(
        int(line.split()[1])
        for line in Path("/proc/meminfo").read_text().splitlines()
        if line.startswith("MemTotal")
    )
    model = next(
        (
            line.split(":", 1)[1].strip()
            for line in Path("/proc/cpuinfo").read_text().splitlines()
            if "model name" in line
        ),
        platform.processor(),
    )
    commit = subprocess.run(
        ["git", "rev-parse", "HEAD"], cwd=ROOT, capture_output=True, text=True
    ).stdout.strip()
    return {
        "cpus": os.cpu_count(),
        "cpu_model": model,
        "memory_gib": round(memory_kb / 1024 / 1024, 1),
        "python": platform.python_version(),
        "duckdb": duckdb.__version__,
        "commit": commit,
    }


def _extracts(customers: int, months: int):
    """The cached demo bank of this size (generated on first use)."""
    from ledgerband.tasks.demo.generator import generate

    folder = BENCH / "cache" / f"{customers}x{months}"
    done = folder / "generated.json"
    if not done.is_file():
        t0 = time.perf_counter()
        files = generate(
            folder / "landing",
            folder / "answers.parquet",
            customers=customers,
            months=months,
            end_period=END_PERIOD,
        )
        done.write_text(
            json.dumps(
                {
                    "rows": files.rows,
                    "periods": files.periods,
                    "extracts": [str(p) for p in files.extracts],
                    "seconds": round(time.perf_counter() - t0, 1),
                }
            )
        )
    return json.loads(done.read_text()), folder / "landing"


TILE = 100_000


def _tiled(customers: int, months: int):
    """`customers // TILE` renamed copies of the TILE-customer bank: one extract per month, its manifest
    re-issued (row count and totals times the copies, new SHA-256), and the customer file."""
    from ledgerband.tasks.ingest.extract_contract import sha256_file

    base, base_landing = _extracts(TILE, months)
    copies = customers // TILE
    folder = BENCH / "cache" / f"{customers}x{months}"
    done = folder / "generated.json"
    if done.is_file():
        return json.loads(done.read_text()), folder / "landing"
    t0 = time.perf_counter()
    con = duckdb.connect()
    con.execute(f"set temp_directory = '{folder / 'spill'}'")
    con.execute("set memory_limit = '8GB'")
    con.execute("create table copies as select range as k from range(?)", [copies])

    # Customer n of copy k becomes customer n + k * TILE (account n: n + k * TILE * 7), with the generator's
    # prefix and at least its width. Not a fixed-width lpad: it cuts a longer number short, and the 100k
    # bank's ids (CU100000.., AC5000000..) outgrow six and seven digits in the last copies, which merged
    # customers and accounts (found by the first 1M run: 9.4% of accounts' balance chains broken).
    def renumbered(column: str, prefix: str, step: int) -> str:
        number = f"(cast(substr({column}, 3) as bigint) + k * {step})::varchar"
        return f"'{prefix}' || lpad({number}, greatest(length({column}) - 2, length({number}))::integer, '0')"

    customer = renumbered("customer_id", "CU", TILE)
    account = renumbered("account_id", "AC", TILE * 7)
    extracts = []
    for period in base["periods"]:
        source = base_landing / period / f"ledger-{period}.csv"
        out = folder / "landing" / period / source.name
        out.parent.mkdir(parents=True, exist_ok=True)
        yyyymm = period.replace("-", "")
        con.execute(
            f"""
            copy (
                select 'CMS{yyyymm}' || lpad((row_number() over (order by booking_date, k, line) - 1)::varchar, 8, '0')
                        as txn_id,
                    account_id, customer_id, booking_date, amount, direction, currency, balance_after,
                    bank_txn_code, purpose_code, counterparty_id, merchant_category, merchant_region
                from (
                    select * exclude (txn_id, customer_id, account_id),
                        {customer} as customer_id, {account} as account_id
                    from (select *, row_number() over () as line
                          from read_csv(?, header = true, all_varchar = true)), copies
                )
                order by booking_date, k, line
            ) to '{out}' (header true)
            """,
            [str(source)],
        )
        manifest = json.loads((source.parent / f"ledger-{period}.manifest.json").read_text())
        for key in ("credit_total", "debit_total"):
            manifest[key] = str(Decimal(manifest[key]) * copies)
        manifest.update(row_count=manifest["row_count"] * copies, sha256=sha256_file(out))
        (out.parent / f"ledger-{period}.manifest.json").write_text(json.dumps(manifest, indent=2) + "\n")
        extracts.append(str(out))
    con.execute(
        f"""
        copy (
            select {customer} as customer_id, birth_date, sex, home_region, opened_date
            from (select *, row_number() over () as line from read_csv(?, header = true, all_varchar = true)),
                copies
            order by k, line
        ) to '{folder / "landing" / "customers.csv"}' (header true)
        """,
        [str(base_landing / "customers.csv")],
    )
    con.close()
    done.write_text(
        json.dumps(
            {
                "rows": base["rows"] * copies,
                "periods": base["periods"],
                "extracts": extracts,
                "seconds": round(time.perf_counter() - t0, 1),
                "tiled_from": f"{TILE}x{months}",
                "copies": copies,
            }
        )
    )
    return json.loads(done.read_text()), folder / "landing"


def _reference(extracts: list[str], work: Path) -> dict:
    """DuckDB doing the plain thing on the same files (a fresh database file, default settings)."""
    con = duckdb.connect(str(work / "reference.duckdb"))
    try:
        files = [str(p) for p in extracts]
        t0 = time.perf_counter()
        con.execute("select count(*) from read_csv(?, header = true, all_varchar = true)", [files]).fetchall()
        scan = time.perf_counter() - t0
        t0 = time.perf_counter()
        con.execute("create table plain as select * from read_csv(?, header = true)", [files])
        load = time.perf_counter() - t0
        t0 = time.perf_counter()
        con.execute(f"create table plain_aggregate as {PLAIN_AGGREGATE}")
        aggregate = time.perf_counter() - t0
    finally:
        con.close()
    return {"scan": round(scan, 2), "load": round(load, 2), "aggregate": round(aggregate, 2)}


def _vm_hwm_mb(pid: int) -> float:
    """The process's peak resident memory since exec or its last reset (VmHWM, proc(5)), 0 once it is gone."""
    try:
        with open(f"/proc/{pid}/status") as f:
            for line in f:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1]) / 1024
    except OSError:
        pass
    return 0.0


def _tree_rss_mb(pid: int) -> float:
    """Resident memory now of the process and every process under it (VmRSS, proc(5)), in MB: the flow
    with its worker processes (train.n_jobs) and, when Prefect starts it as one, its temporary server."""
    children: dict[int, list[int]] = {}
    for entry in os.listdir("/proc"):
        if entry.isdigit():
            try:
                with open(f"/proc/{entry}/stat") as f:
                    ppid = int(f.read().rsplit(")", 1)[1].split()[1])
            except (OSError, IndexError, ValueError):
                continue
            children.setdefault(ppid, []).append(int(entry))
    total, todo = 0.0, [pid]
    while todo:
        p = todo.pop()
        todo.extend(children.get(p, []))
        try:
            with open(f"/proc/{p}/status") as f:
                total += next((int(line.split()[1]) for line in f if line.startswith("VmRSS:")), 0) / 1024
        except OSError:
            pass
    return total


def _run_flow(landing: Path, home: Path, period: str = END_PERIOD) -> tuple[float, float, float, int]:
    """`ledgerband run` for `period` in its own process: (seconds, its peak RSS in MB, the peak of its
    process tree's summed RSS in MB, exit code)."""
    log = (home.parent / f"flow-{period}.log").open("w")
    t0 = time.perf_counter()
    proc = subprocess.Popen(
        run_command(period, landing), env=isolated_env(home), stdout=log, stderr=subprocess.STDOUT
    )
    peak = tree = 0.0
    while proc.poll() is None:
        peak = max(peak, _vm_hwm_mb(proc.pid))
        tree = max(tree, _tree_rss_mb(proc.pid))
        time.sleep(0.05)
    seconds = time.perf_counter() - t0
    log.close()
    return seconds, peak, tree, proc.returncode


def _stages(home: Path, period: str) -> tuple[dict, float]:
    """The published run's stages, and its own seconds from start to finish (ops.runs): the process's
    wall time less Python's imports and the temporary Prefect server's start (a scheduled run's server is
    already up)."""
    con = duckdb.connect(str(home / "warehouse.duckdb"), read_only=True)
    try:
        [(stages, run_seconds)] = con.execute(
            "select stages, epoch(finished_at - started_at) from ops.runs "
            "where status = 'published' and period = ?",
            [period],
        ).fetchall()
    finally:
        con.close()
    return {
        s["stage"]: {"seconds": s["seconds"], "peak_rss_mb": s.get("peak_rss_mb")} for s in json.loads(stages)
    }, float(run_seconds)


def _figures(
    label, customers, months, generated, seconds, peak_mb, tree_mb, run, reference, records, loaded
) -> dict:
    """One column of the table. `run`: `_stages`' answer. `records`: postings the run's features cover;
    `loaded`: those it ingested."""
    stages, run_seconds = run
    ingest_validate = stages["ingest"]["seconds"] + stages["validate"]["seconds"]
    return {
        "label": label,
        "customers": customers,
        "months": months,
        "records": records,
        "records_loaded": loaded,
        "extracts": (
            f"{generated['copies']} renamed copies of the {TILE:,}-customer demo bank"
            if "copies" in generated
            else "demo generator"
        ),
        "generated_seconds": generated["seconds"],
        "flow_seconds": round(seconds, 1),
        "run_seconds": round(run_seconds, 1),
        # Each stage resets the process's high-water mark (VmHWM) to measure its own, which wait4(2)'s
        # maximum also reads: the run's peak is the larger of it and every stage's.
        "flow_peak_rss_mb": round(max([peak_mb] + [s["peak_rss_mb"] or 0 for s in stages.values()])),
        # The flow and every process under it, summed, sampled every 50 ms (a short peak can be missed).
        "tree_peak_rss_mb": round(tree_mb),
        "stages": stages,
        "reference": reference,
        "ratios": {
            "ingest_to_plain_load": round(stages["ingest"]["seconds"] / reference["load"], 1),
            "ingest_validate_to_plain_load": round(ingest_validate / reference["load"], 1),
            "features_to_plain_aggregate": round(stages["features"]["seconds"] / reference["aggregate"], 1),
        },
        "records_per_second": {
            "ingest_validate": round(loaded / ingest_validate),
            "flow": round(records / seconds),
        },
        "microseconds_per_record": round(seconds / records * 1e6, 2),
    }


def _bench_one(customers: int, months: int, work: Path) -> dict:
    """A first run: every month of the load window arrives at once."""
    if customers > TILE and customers % TILE == 0:
        generated, landing = _tiled(customers, months)
    else:
        generated, landing = _extracts(customers, months)
    reference = _reference(generated["extracts"], work)
    home = work / "home"
    home.mkdir()
    seconds, peak_mb, tree_mb, code = _run_flow(landing, home)
    assert code == 0, (work / f"flow-{END_PERIOD}.log").read_text()[-3000:]
    rows = generated["rows"]
    return _figures(
        f"{customers:,} x {months}", customers, months, generated, seconds, peak_mb, tree_mb,
        _stages(home, END_PERIOD), reference, rows, rows,
    )  # fmt: skip


def _bench_monthly(customers: int, months: int, work: Path) -> dict:
    """The scheduled case: the window's earlier months are in (a run a month before, not measured) and
    one new month arrives; staging.transactions is appended to, the features cover the whole window."""
    generated, landing = _extracts(customers, months + 1)
    first, *_, last = generated["periods"]
    window = [e for e in generated["extracts"] if f"ledger-{first}." not in e]
    new = [e for e in window if f"ledger-{last}." in e]
    reference = _reference(window, work)
    reference_new = _reference(new, work / "new")
    reference["load"] = reference_new["load"]  # ingest and validate read the new month only
    reference["scan"] = reference_new["scan"]
    home = work / "home"
    home.mkdir()
    before = str(Period.parse(last).shift(-1))
    _, _, _, code = _run_flow(landing, home, before)
    assert code == 0, (work / f"flow-{before}.log").read_text()[-3000:]
    seconds, peak_mb, tree_mb, code = _run_flow(landing, home, last)
    assert code == 0, (work / f"flow-{last}.log").read_text()[-3000:]
    con = duckdb.connect(str(home / "warehouse.duckdb"), read_only=True)
    try:
        [(loaded,)] = con.execute(
            "select rows_in_file from ops.loads where dataset = 'ledger' and period = ?", [last]
        ).fetchall()
        # The window the features cover (staging.transactions also holds the month that left it).
        [(records,)] = con.execute(
            "select sum(rows_in_file) from ops.loads where dataset = 'ledger' and status = 'accepted' "
            "and period >= ?",
            [str(Period.parse(last).shift(1 - months))],
        ).fetchall()
    finally:
        con.close()
    return _figures(
        f"{customers:,} monthly", customers, months, generated, seconds, peak_mb, tree_mb,
        _stages(home, last), reference, int(records), int(loaded),
    )  # fmt: skip


def _table(results: list[dict]) -> str:
    sizes = [r["label"] for r in results]
    lines = [f"{'':<28}" + "".join(f"{s:>22}" for s in sizes)]

    def row(label, values):
        lines.append(f"{label:<28}" + "".join(f"{v:>22}" for v in values))

    row("records (window)", [f"{r['records']:,}" for r in results])
    row("records loaded", [f"{r['records_loaded']:,}" for r in results])
    for stage in results[0]["stages"]:
        row(
            f"  {stage}",
            [
                f"{r['stages'][stage]['seconds']:.1f} s / {r['stages'][stage]['peak_rss_mb'] or 0:,.0f} MB"
                for r in results
            ],
        )
    row(
        "whole flow (own process)",
        [f"{r['flow_seconds']:.1f} s / {r['flow_peak_rss_mb']:,} MB" for r in results],
    )
    row("  with its child processes", [f"{r['tree_peak_rss_mb']:,} MB" for r in results])
    row("  of it the run (ops.runs)", [f"{r['run_seconds']:.1f} s" for r in results])
    row("DuckDB plain scan", [f"{r['reference']['scan']:.1f} s" for r in results])
    row("DuckDB plain load", [f"{r['reference']['load']:.1f} s" for r in results])
    row("DuckDB plain aggregate", [f"{r['reference']['aggregate']:.1f} s" for r in results])
    row("ingest / plain load", [f"{r['ratios']['ingest_to_plain_load']}x" for r in results])
    row("ingest+validate / load", [f"{r['ratios']['ingest_validate_to_plain_load']}x" for r in results])
    row("features / plain aggregate", [f"{r['ratios']['features_to_plain_aggregate']}x" for r in results])
    row("ingest+validate records/s", [f"{r['records_per_second']['ingest_validate']:,}" for r in results])
    row("flow µs per record", [f"{r['microseconds_per_record']}" for r in results])
    return "\n".join(lines)


def test_monthly_flow_at_scale(tmp_path):
    sizes = [int(s) for s in os.environ.get("BENCH_SIZES", "10000,100000").split(",") if s]
    months = int(os.environ.get("BENCH_MONTHS", "4"))  # the load window: payroll.lookback_months
    monthly = [int(s) for s in os.environ.get("BENCH_MONTHLY", "100000").split(",") if s]
    results = []
    for customers in sizes:
        work = tmp_path / str(customers)
        work.mkdir()
        results.append(_bench_one(customers, months, work))
    for customers in monthly:
        work = tmp_path / f"{customers}-monthly"
        (work / "new").mkdir(parents=True)
        results.append(_bench_monthly(customers, months, work))
    table = _table(results)
    print("\n" + table)
    out = BENCH / "results"
    out.mkdir(parents=True, exist_ok=True)
    stamp = datetime.now().strftime("%Y%m%dT%H%M%S")
    path = out / f"{stamp}-monthly.json"
    path.write_text(json.dumps({"machine": _machine(), "results": results, "table": table}, indent=2) + "\n")
    print(f"results: {path}")
