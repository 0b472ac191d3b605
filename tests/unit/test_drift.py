"""The drift gate's arithmetic and its decision."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from ledgerband.tasks.core.settings import Settings
from ledgerband.tasks.gates.drift import (
    BANDS,
    compare_profiles,
    drift_decision,
    profile,
    psi,
    quantile_edges,
    shares,
)


def test_psi_worked_example():
    # PSI = sum (a - e) ln(a / e) (the population stability index of credit scoring; formula from
    # memory, e.g. Siddiqi 2006, "Credit Risk Scorecards"). Worked by hand for two bins, 50/50 -> 60/40:
    # 0.1 ln 1.2 + (-0.1) ln 0.8 = 0.0182322 + 0.0223144 = 0.0405465.
    assert psi([0.5, 0.5], [0.6, 0.4], 1000, 1000) == pytest.approx(0.1 * np.log(1.2) - 0.1 * np.log(0.8))
    assert psi([0.5, 0.5], [0.6, 0.4], 1000, 1000) == pytest.approx(0.0405465, abs=1e-7)
    # Symmetric in its two arguments, zero for equal shares.
    assert psi([0.6, 0.4], [0.5, 0.5], 10, 10) == pytest.approx(psi([0.5, 0.5], [0.6, 0.4], 10, 10))
    assert psi([0.2, 0.3, 0.5], [0.2, 0.3, 0.5], 10, 10) == 0.0


def test_an_empty_bin_counts_as_half_a_customer():
    value = psi([0.5, 0.5, 0.0], [0.5, 0.4, 0.1], 100, 100)
    assert np.isfinite(value) and value > 0


def test_deciles_split_a_sample_into_tenths():
    values = np.arange(1000, dtype=float)
    edges = quantile_edges(values, 10)
    assert len(edges) == 9
    np.testing.assert_allclose(shares(values, edges), np.full(10, 0.1))


def _frame(rng, n, shift=0.0):
    return pd.DataFrame(
        {
            "spend": rng.lognormal(7 + shift, 0.5, n),
            "annual_salary": np.where(rng.random(n) < 0.8, rng.lognormal(10.6 + shift, 0.3, n), np.nan),
        }
    )


def test_the_same_population_is_stable_and_a_shifted_one_is_not():
    rng = np.random.default_rng(4)
    then = _frame(rng, 5000)
    bands_then = rng.integers(0, 6, 5000)
    stored = profile(then, ["spend"], bands_then, 6, 10)
    same = compare_profiles(stored, _frame(rng, 5000), rng.integers(0, 6, 5000)).set_index("subject")["psi"]
    assert (same < 0.02).all()
    moved = compare_profiles(stored, _frame(rng, 5000, shift=0.4), np.full(5000, 5)).set_index("subject")[
        "psi"
    ]
    assert (moved > 0.25).all()
    assert set(moved.index) == {"spend", "label:annual_salary", BANDS}


def test_drift_decision_stops_warns_and_passes():
    s = Settings()
    table = pd.DataFrame({"subject": ["spend", BANDS], "psi": [0.05, 0.30]})
    stop = drift_decision(table, None, "2026-09", s)
    assert not stop.passed and "band_shares 0.300" in stop.reason and "drift.psi_stop 0.25" in stop.reason
    warn = drift_decision(table.assign(psi=[0.05, 0.12]), None, "2026-09", s)
    assert warn.passed and warn.warning and warn.outcome == "warn" and "band_shares 0.120" in warn.reason
    aged = drift_decision(table.assign(psi=[0.01, 0.02]), {"mae_rise": 0.4}, "2026-09", s)
    assert aged.warning and "40% worse" in aged.reason
    calm = drift_decision(table.assign(psi=[0.01, 0.02]), {"mae_rise": 0.05}, "2026-09", s)
    assert calm.outcome == "pass" and "stable since 2026-09" in calm.reason
    first = drift_decision(pd.DataFrame(), None, None, s)
    assert first.passed and "no earlier published month" in first.reason
