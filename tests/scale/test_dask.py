"""The same month, three ways: one warehouse build, buckets one after another, buckets on Dask.

The per-customer SQL files run per bucket of customers (ledgerband.tasks.layers.buckets); with
`scale.runner = "dask"` the buckets and the models' CV splits run on a local Dask cluster of two worker
processes on 127.0.0.1, started by Prefect's Dask task runner. Every table the layers build and every
table readers get must be the same as the single-machine, single-bucket run's.

Marked `scale` (about 3 minutes): `make test-scale`; CI runs it after the default suite.
"""

from __future__ import annotations

import json
from pathlib import Path

import duckdb
import pytest

from ledgerband.tasks.core.settings import Settings
from ledgerband.tasks.layers.buckets import per_customer_models
from tests.monthly_cli import reader_tables, run_month

PERIOD = "2026-10"
CUSTOMERS = 600
# A small bank and a quick model comparison: what is under test is where the work runs, not accuracy.
# Every kind of candidate, so each is scored on one-thread Dask workers as well as in the run's process
# (HistGradientBoosting and the forest use threads there).
CONFIG = """
[accuracy]
min_labelled_customers = 50
min_mae_skill = 0.0
min_band_skill = 0.0
coverage_tolerance = 0.5
[train]
candidates = ["linear_regression", "ridge", "decision_tree", "random_forest", "gradient_boosting"]
cv_folds = 3
cv_repeats = 2
"""


@pytest.fixture(scope="module")
def landing(tmp_path_factory):
    from ledgerband.tasks.demo.generator import generate

    root = tmp_path_factory.mktemp("scale-landing")
    files = generate(root / "landing", root / "answers.parquet", customers=CUSTOMERS, months=4, seed=11)
    (root / "ledgerband.toml").write_text(CONFIG)
    return files.landing_dir


def _run(home: Path, landing: Path, **scale: str) -> None:
    env = {f"LEDGERBAND_SCALE__{k.upper()}": v for k, v in scale.items()}
    done = run_month(home, landing, PERIOD, env)
    assert done.returncode == 0, done.stdout[-4000:]


def _built_tables(home: Path) -> dict[str, list[tuple]]:
    con = duckdb.connect(str(Settings(home=home).warehouse_path), read_only=True)
    try:
        tables = {
            m.relation: con.execute(f"select * from {m.relation} order by all").fetchall()
            for m in per_customer_models()
        }
        # Every candidate's score on every split (the run id differs between runs, the scores must not).
        tables["ml.cv_scores"] = con.execute(
            "select candidate, split_index, rmse, mae from ml.cv_scores order by all"
        ).fetchall()
        return tables
    finally:
        con.close()


def _buckets(home: Path) -> int:
    """How many buckets the run's feature stage used (from its ops.runs record)."""
    con = duckdb.connect(str(Settings(home=home).warehouse_path), read_only=True)
    try:
        stages = con.execute("select stages from ops.runs order by started_at desc limit 1").fetchone()[0]
    finally:
        con.close()
    stages = json.loads(stages) if isinstance(stages, str) else stages
    features = next(s for s in stages if s["stage"] == "features")
    detail = json.loads(features["detail"]) if isinstance(features["detail"], str) else features["detail"]
    return int(detail["buckets"])


def test_buckets_and_dask_publish_what_one_machine_does(tmp_path, landing):
    _run(tmp_path / "whole", landing)
    _run(tmp_path / "buckets", landing, bucket_customers="150")
    _run(tmp_path / "dask", landing, bucket_customers="150", runner="dask", dask_workers="2")

    assert [_buckets(tmp_path / h) for h in ("whole", "buckets", "dask")] == [1, 4, 4]
    whole_built, whole_read = _built_tables(tmp_path / "whole"), reader_tables(tmp_path / "whole")
    assert whole_built["features.customer_label"], "the month built no labels: nothing would be compared"
    assert {row[0] for row in whole_built["ml.cv_scores"]} >= {"gradient_boosting", "random_forest"}
    assert whole_read["income_bands"], "the month published no bands: nothing would be compared"
    for other in ("buckets", "dask"):
        built, read = _built_tables(tmp_path / other), reader_tables(tmp_path / other)
        for relation, rows in whole_built.items():
            assert built[relation] == rows, f"{other}: {relation} differs from the single build"
        for table, rows in whole_read.items():
            assert read[table] == rows, f"{other}: published {table} differs from the single-machine run"
