"""tasks/warehouse.resource_error: DuckDB out of memory or of spill space becomes advice naming the setting.

The exceptions are DuckDB's own, provoked with tiny limits (not hand-made), so a change in how DuckDB
words them shows up here.
"""

from __future__ import annotations

import duckdb
import pytest

from ledgerband.tasks.core.context import RunContext
from ledgerband.tasks.core.errors import LedgerbandError
from ledgerband.tasks.core.settings import ScaleSettings, Settings
from ledgerband.tasks.core.warehouse import FEATURES_STAGE, duckdb_limits, resource_error
from ledgerband.tasks.ops.runlog import RunLog


def _duckdb_error(tmp_path, config: dict, sql: str) -> BaseException:
    con = duckdb.connect(str(tmp_path / "w.duckdb"), config={"threads": 1, **config})
    try:
        con.execute(sql).fetchall()
    except duckdb.Error as exc:
        return exc
    finally:
        con.close()
    raise AssertionError(f"DuckDB ran {sql!r} within {config}")


def test_spill_space_used_up_names_the_folder_and_the_settings(tmp_path):
    scale = ScaleSettings(memory_limit="16MB", temp_directory=str(tmp_path / "spill"), max_temp_size="1MB")
    exc = _duckdb_error(
        tmp_path,
        duckdb_limits(scale),
        "create table t as select range as x, random() as r from range(600000) order by r",
    )
    advice = resource_error(exc, scale, tmp_path / "w.duckdb")
    assert isinstance(advice, LedgerbandError)
    text = str(advice)
    assert "room to spill" in text and str(tmp_path / "spill") in text
    assert "scale.max_temp_size = 1MB" in text and "scale.temp_directory" in text and "GiB free" in text


def test_memory_that_cannot_spill_names_the_memory_limit(tmp_path):
    scale = ScaleSettings(memory_limit="64MB")
    # median() keeps every group's values in memory: DuckDB cannot spill it (why features.customer sorts).
    exc = _duckdb_error(
        tmp_path,
        duckdb_limits(scale),
        "select x % 1000 as g, median(x) from (select range as x from range(20000000)) group by g",
    )
    advice = resource_error(exc, scale, tmp_path / "w.duckdb")
    assert isinstance(advice, LedgerbandError)
    assert "ran out of memory" in str(advice) and "scale.memory_limit = 64MB" in str(advice)
    assert "SET threads" not in str(advice)  # DuckDB's own suggestions are not ours to repeat
    # The bucket size is named only where it helps: the stage that builds features bucket by bucket.
    assert "bucket_customers" not in str(advice)
    assert "bucket_customers" not in str(resource_error(exc, scale, tmp_path / "w.duckdb", "validate"))
    in_features = str(resource_error(exc, scale, tmp_path / "w.duckdb", FEATURES_STAGE))
    assert "in the features stage" in in_features and "scale.bucket_customers (now 25,000)" in in_features


def test_other_errors_are_left_alone(tmp_path):
    exc = _duckdb_error(tmp_path, {}, "select * from no_such_table")
    assert resource_error(exc, ScaleSettings(), tmp_path / "w.duckdb") is None
    assert resource_error(ValueError("x"), ScaleSettings(), tmp_path / "w.duckdb") is None


def test_a_stage_that_runs_out_of_memory_fails_with_the_advice_in_ops_runs(tmp_path):
    settings = Settings(home=tmp_path, scale=ScaleSettings(memory_limit="64MB"))
    log = RunLog(RunContext.create("2026-10", settings=settings, run_id="oom-run"))
    exc = _duckdb_error(
        tmp_path, {"memory_limit": "64MB"}, "select median(range) from range(20000000) group by range % 1000"
    )
    with pytest.raises(LedgerbandError, match="scale.memory_limit = 64MB") as raised, log.stage("features"):
        raise exc
    assert raised.value.__cause__ is exc
    assert log.stages[-1]["status"] == "failed"
    assert log.stages[-1]["detail"].startswith("OutOfMemoryException: the warehouse ran out of memory")
