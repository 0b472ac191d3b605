import math

from tasks.gates import accuracy_gate, quality_gate
from tasks.settings import Settings


def _validation(quarantined: int, rows: int = 1000) -> dict:
    return {
        "load_id": "L1",
        "source_file": "/landing/2026-10/ledger-2026-10.csv",
        "rows_in_file": rows,
        "rows_quarantined": quarantined,
        "quarantined_share": quarantined / rows,
        "rule_counts": {"amount_format": quarantined},
        "examples": ["line 17: amount_format (amount='1.5')"],
    }


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


def _train(**changes) -> dict:
    base = {
        "n_labelled": 1500,
        "champion": "linear_regression",
        "baseline_rmse": 20_000.0,
        "champion_rmse": 10_000.0,
        "champion_mae": 7_000.0,
        "skill_over_baseline": 0.5,
        "band_accuracy": 0.6,
        "within_one_band": 0.95,
        "note": None,
    }
    return {**base, **changes}


def test_accuracy_gate_passes_a_good_champion():
    d = accuracy_gate(_train(), Settings())
    assert d.passed and "skill 50.00%" in d.reason


def test_accuracy_gate_reports_every_failing_condition():
    d = accuracy_gate(
        _train(n_labelled=50, skill_over_baseline=0.1, band_accuracy=0.3, within_one_band=0.8), Settings()
    )
    assert not d.passed
    for part in (
        "labelled customers 50 < accuracy.min_labelled_customers 200",
        "RMSE skill over the predict-the-mean baseline 10.00% < accuracy.min_skill_over_baseline 20.00%",
        "band accuracy 30.00% < accuracy.min_band_accuracy 45.00%",
        "within-one-band rate 80.00% < accuracy.min_within_one_band 85.00%",
    ):
        assert part in d.reason


def test_accuracy_gate_treats_a_missing_figure_as_a_failure():
    # NaN compares false with everything; a gate written as `figure < threshold` would let it through.
    assert not accuracy_gate(_train(band_accuracy=math.nan), Settings()).passed


def test_accuracy_gate_stops_when_no_model_could_be_trained():
    d = accuracy_gate(_train(n_labelled=6, champion=None, note="only 6 labelled customers"), Settings())
    assert not d.passed and "only 6 labelled customers" in d.reason


def test_a_stop_raised_after_a_passed_gate_replaces_the_pass(con):
    from tasks.gates import Decision, record_decision, record_stop

    record_decision(
        con, "r1", "2026-10", Decision("quality", True, "extracts within the limit", {"f.csv": 0.0})
    )
    record_stop(con, "r1", "2026-10", "quality", "features.customer breaks rule one_row_per_customer")
    assert con.execute("select decision, reason, figures from published.decisions").fetchall() == [
        ("stop", "features.customer breaks rule one_row_per_customer", '{"f.csv": 0.0}')
    ]


def test_a_stop_with_figures_is_not_overwritten(con):
    from tasks.gates import Decision, record_decision, record_stop

    record_decision(con, "r1", "2026-10", Decision("quality", False, "share too high", {"share": 0.2}))
    record_stop(con, "r1", "2026-10", "quality", "quality gate stopped the run: share too high")
    assert con.execute("select reason, figures from published.decisions").fetchall() == [
        ("share too high", '{"share": 0.2}')
    ]
