"""The per-customer SQL layers, built per bucket of customers: one after another here, or on Dask.

A layer file headed `-- Scope: per customer` promises that a customer's rows depend only on that
customer's rows of what it reads (and on tables without a customer_id, handed whole). Such files run on
buckets of customers split by a hash of customer_id, so their memory is bounded by a bucket rather than
by the bank, and buckets can run on several machines. The files are the same on every path; only the
tables they read are different: each bucket gets a DuckDB database of its own in which

- every input with a customer_id column holds that bucket's customers' rows only, and
- every other input (payers, pay calendars, reference tables) is whole.

Inputs and outputs travel as Parquet through a folder every worker can reach (`scale.shared_folder`).
The warehouse then holds each output as the union of the buckets' files.
"""

from __future__ import annotations

import math
import shutil
import time
from collections.abc import Callable, Sequence
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import duckdb

from ledgerband.tasks.core.errors import LedgerbandError
from ledgerband.tasks.core.settings import ScaleSettings
from ledgerband.tasks.core.warehouse import (
    SqlModel,
    columns_of,
    duckdb_limits,
    layer_models,
    scalar,
    sql_literal,
)


def per_customer_models() -> list[SqlModel]:
    """The per-customer layer files, in build order."""
    return [m for m in layer_models() if m.per_customer]


def bucket_inputs(models: Sequence[SqlModel]) -> list[str]:
    """What the per-customer files read that none of them builds, in a stable order."""
    built = {m.relation for m in models}
    return sorted({r for m in models for r in m.reads if r not in built})


def bucket_count(con: duckdb.DuckDBPyConnection, scale: ScaleSettings) -> int:
    customers = int(scalar(con, "select count(*) from staging.customers") or 0)
    return max(1, math.ceil(customers / scale.bucket_customers))


# The bucket of a customer: DuckDB's hash of the id (the same on every machine of one DuckDB version; a
# different split between versions changes which bucket a customer is built in, never the result).
BUCKET_OF = "coalesce(hash(customer_id) % {n}, 0)"


def write_inputs(
    con: duckdb.DuckDBPyConnection, folder: Path, inputs: Sequence[str], n: int
) -> dict[str, bool]:
    """Each input as Parquet under folder/in: split by bucket (hive folders) or whole. Returns split-ness."""
    split = {}
    (folder / "in").mkdir(parents=True, exist_ok=True)
    for relation in inputs:
        split[relation] = "customer_id" in columns_of(con, relation)
        target = folder / "in" / relation
        # The empty file keeps the columns for a bucket with no rows (the hive split writes no folder then).
        columns = sql_literal(f"{target}.columns.parquet")
        con.execute(f"copy (select * from {relation} limit 0) to {columns} (format parquet)")
        if split[relation]:
            con.execute(
                f"copy (select *, {BUCKET_OF.format(n=int(n))} as bucket from {relation}) "
                f"to {sql_literal(target)} (format parquet, partition_by (bucket), overwrite_or_ignore true)"
            )
        else:
            con.execute(f"copy {relation} to {sql_literal(f'{target}.parquet')} (format parquet)")
    return split


@dataclass(frozen=True)
class BucketJob:
    """One bucket's work: everything a worker needs, picklable, no connection or settings object."""

    folder: str
    bucket: int
    split: dict[str, bool]  # input relation -> split by bucket (else whole)
    params: dict[str, Any]
    config: dict[str, Any]  # DuckDB limits


@dataclass(frozen=True)
class BucketResult:
    bucket: int
    row_counts: dict[str, int]
    seconds: float


def build_bucket(job: BucketJob) -> BucketResult:
    """Build the per-customer files for one bucket in a DuckDB of its own; outputs to folder/out/<bucket>."""
    started = time.perf_counter()
    folder = Path(job.folder)
    out = folder / "out" / str(job.bucket)
    out.mkdir(parents=True, exist_ok=True)
    spill = folder / "spill" / str(job.bucket)
    spill.mkdir(parents=True, exist_ok=True)
    con = duckdb.connect(config={**job.config, "temp_directory": str(spill)})
    try:
        for relation, is_split in job.split.items():
            schema = relation.split(".")[0]
            con.execute(f"create schema if not exists {schema}")
            source = folder / "in" / relation
            part = source / f"bucket={job.bucket}"
            if not is_split:
                files = sql_literal(f"{source}.parquet")
            elif part.is_dir():
                files = sql_literal(f"{part}/*.parquet")
            else:
                files = sql_literal(f"{source}.columns.parquet")
            con.execute(f"create table {relation} as select * from read_parquet({files})")
        counts = {}
        for model in per_customer_models():
            con.execute(f"create schema if not exists {model.layer}")
            model.build(con, job.params)
            target = sql_literal(f"{out / model.relation}.parquet")
            con.execute(f"copy {model.relation} to {target} (format parquet)")
            counts[model.relation] = int(scalar(con, f"select count(*) from {model.relation}"))
        return BucketResult(job.bucket, counts, round(time.perf_counter() - started, 3))
    finally:
        con.close()
        shutil.rmtree(spill, ignore_errors=True)


def collect(con: duckdb.DuckDBPyConnection, folder: Path, n: int) -> dict[str, int]:
    """Each per-customer table in the warehouse as the union of its buckets' files."""
    counts = {}
    for model in per_customer_models():
        files = ", ".join(
            sql_literal(f"{folder / 'out' / str(b) / model.relation}.parquet") for b in range(n)
        )
        con.execute(f"create or replace table {model.relation} as select * from read_parquet([{files}])")
        counts[model.relation] = int(scalar(con, f"select count(*)::bigint from {model.relation}"))
    return counts


Mapper = Callable[[Callable[[BucketJob], BucketResult], list[BucketJob]], list[BucketResult]]


def run_here(fn: Callable[[BucketJob], BucketResult], jobs: list[BucketJob]) -> list[BucketResult]:
    return [fn(job) for job in jobs]


@contextmanager
def bucket_folder(root: Path, run_id: str):
    """A fresh folder for one build's Parquet, removed afterwards (also when the build fails)."""
    folder = root / f"features-{run_id}"
    shutil.rmtree(folder, ignore_errors=True)
    folder.mkdir(parents=True)
    try:
        yield folder
    finally:
        shutil.rmtree(folder, ignore_errors=True)


def build_per_customer(
    con: duckdb.DuckDBPyConnection,
    params: dict[str, Any],
    scale: ScaleSettings,
    root: Path,
    run_id: str,
    n: int,
    mapper: Mapper = run_here,
) -> tuple[dict[str, int], list[BucketResult]]:
    """Split the inputs into n buckets, build each (through `mapper`), and collect the outputs."""
    models = per_customer_models()
    with bucket_folder(root, run_id) as folder:
        split = write_inputs(con, folder, bucket_inputs(models), n)
        jobs = [BucketJob(str(folder), b, split, dict(params), duckdb_limits(scale)) for b in range(n)]
        results = mapper(build_bucket, jobs)
        if sorted(r.bucket for r in results) != list(range(n)):
            raise LedgerbandError(f"the feature build got back buckets {[r.bucket for r in results]} of {n}")
        return collect(con, folder, n), results
