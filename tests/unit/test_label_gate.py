"""The label gate (ledgerband.tasks.gates.labels): each figure at and just past its threshold."""

import math

from ledgerband.tasks.core.settings import LabelSettings
from ledgerband.tasks.gates.labels import LabelStats, label_gate


def _stats(**changes) -> LabelStats:
    base = {
        "customers": 1000,
        "labelled": 800,
        "with_current_pay": 850,
        "irregular": 50,
        "median_label": 30_000.0,
        "coded_credits_this_month": 900,
        "coded_credits_month_before": 1000.0,
        "previous_median_label": 30_000.0,
    }
    return LabelStats(**{**base, **changes})


def test_a_healthy_month_passes():
    d = label_gate(_stats(), LabelSettings())
    assert d.passed and d.gate == "labels" and "800 of 1000 customers labelled" in d.reason


def test_codes_that_vanish_stop_the_run():
    d = label_gate(_stats(coded_credits_this_month=12), LabelSettings())
    assert not d.passed
    assert "salary-coded credits in the run's month fell 98.80%" in d.reason
    assert "labels.max_coded_payroll_drop 50.00%" in d.reason


def test_each_threshold_holds_at_its_value_and_stops_past_it():
    limits = LabelSettings()
    assert label_gate(_stats(labelled=100), limits).passed  # exactly 10%
    assert not label_gate(_stats(labelled=99), limits).passed
    assert label_gate(_stats(irregular=170), limits).passed  # 170 / 850 = exactly 20%
    assert not label_gate(_stats(irregular=171), limits).passed
    assert label_gate(_stats(coded_credits_this_month=500), limits).passed  # exactly 50% below
    assert not label_gate(_stats(coded_credits_this_month=499), limits).passed
    assert label_gate(_stats(median_label=34_500.0), limits).passed  # +15%
    assert not label_gate(_stats(median_label=34_600.0), limits).passed
    assert not label_gate(_stats(median_label=25_000.0), limits).passed  # -16.7%


def test_figures_without_an_earlier_month_are_not_judged():
    d = label_gate(_stats(coded_credits_month_before=None, previous_median_label=None), LabelSettings())
    assert d.passed and d.figures["coded_drop"] is None and d.figures["median_change"] is None


def test_no_labels_at_all_is_a_stop_not_a_nan_pass():
    d = label_gate(_stats(labelled=0, median_label=None, with_current_pay=0, irregular=0), LabelSettings())
    assert not d.passed and "labelled share 0.00%" in d.reason
    assert not math.isnan(d.figures["labelled_share"])
