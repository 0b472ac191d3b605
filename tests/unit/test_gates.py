import math

import pytest

from ledgerband.tasks.core.context import RunContext
from ledgerband.tasks.core.errors import GateStopped
from ledgerband.tasks.core.settings import Settings
from ledgerband.tasks.gates import Decision, enforce
from ledgerband.tasks.gates.accuracy import accuracy_gate
from ledgerband.tasks.gates.quarantine_share import quality_gate
from ledgerband.tasks.modeling.train import TrainSummary
from ledgerband.tasks.quality.validate import ValidationSummary


def _validation(quarantined: int, rows: int = 1000) -> ValidationSummary:
    return ValidationSummary(
        load_id="L1",
        source_file="/landing/2026-10/ledger-2026-10.csv",
        rows_in_file=rows,
        rows_quarantined=quarantined,
        rule_counts={"amount_format": quarantined},
        examples=["line 17: amount_format (amount='1.5')"],
    )


def test_quality_gate_passes_at_exactly_the_threshold():
    assert quality_gate([_validation(10)], Settings()).passed  # 1.00% with a 1% limit


def test_quality_gate_stop_names_file_figure_threshold_and_rule():
    d = quality_gate([_validation(11)], Settings())
    assert not d.passed
    for part in (
        "ledger-2026-10.csv",
        "1.10%",
        "quality.max_quarantine_share 1.00%",
        "amount_format (11)",
        "line 17",
    ):
        assert part in d.reason


def _train(**changes) -> TrainSummary:
    base = {
        "run_id": "r1",
        "period": "2026-10",
        "n_customers": 2000,
        "candidates": [],
        "n_labelled": 1500,
        "champion": "linear_regression",
        "champion_mae": 7_000.0,
        "mae_baseline": "baseline_median",
        "baseline_mae": 15_000.0,
        "mae_skill": 0.53,
        "mae_skill_lower": 0.50,
        "band_baseline": "baseline_median",
        "baseline_band_accuracy": 0.40,
        "band_accuracy": 0.68,
        "band_skill": 0.47,
        "band_skill_lower": 0.42,
        "within_one_band": 0.99,
        "interval_level": 0.80,
        "coverage": 0.81,
        "largest_group_gap": 0.12,
        "largest_gap_attribute": "age_band",
        "note": None,
    }
    return TrainSummary(**{**base, **changes})


def test_accuracy_gate_passes_a_good_champion():
    d = accuracy_gate(_train(), Settings())
    assert d.passed and "linear_regression" in d.reason and "lower bound" in d.reason


def test_accuracy_gate_judges_the_lower_bound_not_the_mean():
    # A mean skill well above the threshold does not pass when its lower bound is below it.
    d = accuracy_gate(_train(mae_skill=0.30, mae_skill_lower=0.15), Settings())
    assert not d.passed
    assert (
        "MAE skill over baseline_median 30.00% (95% lower bound 15.00%) < accuracy.min_mae_skill 20.00%"
        in (d.reason)
    )


def test_accuracy_gate_reports_every_failing_condition_and_what_would_help():
    d = accuracy_gate(
        _train(
            n_labelled=50,
            band_skill=0.2,
            band_skill_lower=0.1,
            coverage=0.70,
            curve_advice="about 1,200 labelled customers would reach the MAE-skill threshold",
        ),
        Settings(),
    )
    assert not d.passed
    for part in (
        "labelled customers 50 < accuracy.min_labelled_customers 200",
        "(95% lower bound 10.00%",
        "< accuracy.min_band_skill 20.00%",
        "coverage 70.00% is more than accuracy.coverage_tolerance 5.00% from the nominal 80.00%",
        "What would change the answer: about 1,200 labelled customers",
    ):
        assert part in d.reason
    assert d.figures["band_skill_lower"] == 0.1 and d.thresholds["min_band_skill"] == 0.2


def test_group_gap_is_reported_but_gated_only_when_configured():
    wide = _train(largest_group_gap=0.30)
    assert accuracy_gate(wide, Settings()).passed
    d = accuracy_gate(wide, Settings(accuracy={"max_group_gap": 0.15}))
    assert not d.passed and "between age_band groups > accuracy.max_group_gap 15.00%" in d.reason


def test_accuracy_gate_treats_a_missing_figure_as_a_failure():
    assert not accuracy_gate(_train(band_skill_lower=math.nan), Settings()).passed
    assert not accuracy_gate(_train(coverage=None), Settings()).passed


def test_accuracy_gate_stops_when_no_model_could_be_trained():
    d = accuracy_gate(_train(n_labelled=6, champion=None, note="only 6 labelled customers"), Settings())
    assert not d.passed and "only 6 labelled customers" in d.reason


def _decisions(con):
    return con.execute(
        "select gate, check_name, subject, decision, reason, figures from published.decisions order by decided_at"
    ).fetchall()


def test_enforce_records_a_pass_and_lets_the_run_go_on(con):
    ctx = RunContext.create("2026-10", settings=Settings(), run_id="r1")
    d = Decision("quality", "quarantine_share", True, "within the limit", {"f.csv": 0.0})
    assert enforce(con, ctx, d) is d
    assert _decisions(con) == [
        ("quality", "quarantine_share", "run", "pass", "within the limit", '{"f.csv": 0.0}')
    ]


def test_enforce_records_the_stop_with_its_figures_before_raising(con):
    ctx = RunContext.create("2026-10", settings=Settings(), run_id="r1")
    d = Decision(
        "quality", "manifest_reconciliation", False, "f.csv: rows differ", {"rows": 5}, subject="f.csv"
    )
    with pytest.raises(GateStopped, match="quality gate stopped the run: f.csv: rows differ") as stop:
        enforce(con, ctx, d)
    assert stop.value.check == "manifest_reconciliation" and stop.value.run_status == "stopped"
    assert _decisions(con) == [
        ("quality", "manifest_reconciliation", "f.csv", "stop", "f.csv: rows differ", '{"rows": 5}')
    ]


def test_a_later_check_keeps_the_earlier_checks_decisions(con):
    """A feature-suite stop after the extracts passed must not erase what the extracts' check measured."""
    ctx = RunContext.create("2026-10", settings=Settings(), run_id="r1")
    enforce(con, ctx, Decision("quality", "quarantine_share", True, "within the limit", {"f.csv": 0.0}))
    with pytest.raises(GateStopped):
        enforce(con, ctx, Decision("quality", "feature_suite", False, "features.customer breaks rule x"))
    assert [(r[1], r[3]) for r in _decisions(con)] == [
        ("quarantine_share", "pass"),
        ("feature_suite", "stop"),
    ]


def test_enforce_writes_alongside_work_in_the_same_transaction(con):
    """If recording fails, the work done alongside (e.g. accepting the loads) is rolled back with it."""
    ctx = RunContext.create("2026-10", settings=Settings(), run_id="r1")
    import duckdb

    con.execute("create table t (x int)")
    con.execute("drop table published.decisions")  # recording the decision will fail
    with pytest.raises(duckdb.CatalogException):
        enforce(
            con,
            ctx,
            Decision("quality", "quarantine_share", True, "ok"),
            alongside=lambda c: c.execute("insert into t values (1)"),
        )
    assert con.execute("select count(*) from t").fetchall() == [(0,)]


def test_a_file_that_breaks_its_own_contract_is_bad_input_not_a_gate_verdict():
    # Exit codes: 2 bad input or configuration (manifest mismatches and header rules included), 3 a gate.
    assert GateStopped("quality", "rows differ", check="manifest_reconciliation").exit_code == 2
    assert GateStopped("quality", "header", check="extract_contract").exit_code == 2
    assert GateStopped("quality", "too many bad records", check="quarantine_share").exit_code == 3
    assert GateStopped("accuracy", "too weak", check="accuracy").exit_code == 3


def test_an_accuracy_stop_withholds_the_month():
    assert GateStopped("accuracy", "too weak").run_status == "withheld"
