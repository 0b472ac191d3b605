"""Benchmark: the monthly flow on a larger synthetic bank. Run with `make bench` (not in the default run).

BENCH_CUSTOMERS (default 20000) and BENCH_MONTHS (default 3) set the size. Prints the generation time,
each stage's seconds from ops.runs, rows per second for ingest+validate, and the process's peak RSS.
"""

from __future__ import annotations

import json
import os
import resource
import time

import duckdb
import pytest

pytestmark = pytest.mark.bench


def test_monthly_flow_at_scale(tmp_path, monkeypatch, prefect_api):
    customers = int(os.environ.get("BENCH_CUSTOMERS", "20000"))
    months = int(os.environ.get("BENCH_MONTHS", "4"))
    monkeypatch.setenv("LEDGERBAND_HOME", str(tmp_path))
    from ledgerband.flows.monthly import monthly_run
    from ledgerband.tasks.demo.generator import generate
    from ledgerband.tasks.settings import get_settings

    get_settings.cache_clear()
    s = get_settings()
    t0 = time.perf_counter()
    files = generate(
        s.demo_landing_dir, s.demo_answers_path, customers=customers, months=months, end_period="2026-10"
    )
    generated = time.perf_counter() - t0
    t1 = time.perf_counter()
    result = monthly_run(files.periods[-1], files.landing_dir)
    total = time.perf_counter() - t1
    con = duckdb.connect(str(s.warehouse_path), read_only=True)
    stages = json.loads(
        con.execute("select stages from ops.runs where run_id = ?", [result.run_id]).fetchall()[0][0]
    )
    con.close()
    peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    by_stage = {st["stage"]: st["seconds"] for st in stages}
    print(f"\nbench: {customers} customers x {months} months = {files.rows:,} ledger records")
    print(f"  generate demo files   {generated:8.1f} s")
    for name, seconds in by_stage.items():
        print(f"  {name:<21} {seconds:8.1f} s")
    print(f"  monthly flow, total   {total:8.1f} s")
    ingest_validate = by_stage["ingest"] + by_stage["validate"]
    print(f"  ingest+validate       {files.rows / ingest_validate:8.0f} records/s")
    print(f"  peak RSS              {peak_mb:8.0f} MB")
    assert result.status == "published"
