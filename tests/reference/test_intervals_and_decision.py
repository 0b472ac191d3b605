"""Conformal coverage against its published guarantee, and the accuracy gate's decision on data whose
answer is known."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from sklearn.linear_model import LinearRegression

from ledgerband.tasks.core.settings import Settings
from ledgerband.tasks.gates.accuracy import accuracy_gate
from ledgerband.tasks.modeling.amounts import band_confidence, widen_to
from ledgerband.tasks.modeling.intervals import covered, fit_conformal, predict_intervals
from ledgerband.tasks.modeling.train import TrainSummary, evaluate, summarise


def _exchangeable(rng, n: int) -> tuple[pd.DataFrame, np.ndarray]:
    # Positive, income-like, multiplicative noise (the gamma score needs positive targets).
    X = pd.DataFrame({"a": rng.normal(size=n), "b": rng.normal(size=n)})
    y = np.exp(10.6 + 0.3 * X["a"].to_numpy() + rng.normal(0, 0.25, n))
    return X, y


@pytest.mark.parametrize("score", ["absolute", "gamma"])
def test_split_conformal_coverage_is_within_the_finite_sample_guarantee(score):
    # Source: Lei, G'Sell, Rinaldo, Tibshirani & Wasserman (2018), JASA 113:1094-1111, Theorem 2.2: for
    # exchangeable data split conformal covers with probability in [1 - a, 1 - a + 1/(n_cal + 1)]. We
    # average the coverage of fresh test points over many independent draws; the band is widened by
    # four Monte Carlo standard errors. The gamma score is asymmetric: MAPIE calibrates each side at a/2,
    # so the upper end of the band is 1 - a + 2/(n_cal + 1).
    s = Settings(
        intervals={"method": "split", "level": 0.8, "conformity_score": score, "calibration_share": 0.25}
    )
    rng = np.random.default_rng(20261202)
    n, n_cal, draws, n_test = 200, 50, 300, 100
    rates = []
    for _ in range(draws):
        X, y = _exchangeable(rng, n + n_test)
        model = fit_conformal(LinearRegression(), X.iloc[:n], y[:n], s)
        rates.append(covered(y[n:], predict_intervals(model, X.iloc[n:])).mean())
    mean, se = float(np.mean(rates)), float(np.std(rates, ddof=1) / np.sqrt(draws))
    slack = (1 if score == "absolute" else 2) / (n_cal + 1)
    assert 0.8 - 4 * se <= mean <= 0.8 + slack + 4 * se


def test_cv_conformal_coverage_is_close_to_nominal_on_well_behaved_data():
    # The CV ("base") method has no finite-sample guarantee (Barber, Candes, Ramdas & Tibshirani 2021,
    # Annals of Statistics 49:486-507, from memory); for a stable model on exchangeable data it is close
    # to nominal. Tolerance 3 points: common practice, and the gate's own tolerance is 5.
    s = Settings(intervals={"method": "cv", "level": 0.8, "conformity_score": "absolute"})
    rng = np.random.default_rng(7)
    rates = []
    for _ in range(40):
        X, y = _exchangeable(rng, 700)
        model = fit_conformal(LinearRegression(), X.iloc[:200], y[:200], s)
        rates.append(covered(y[200:], predict_intervals(model, X.iloc[200:])).mean())
    assert abs(np.mean(rates) - 0.8) <= 0.03


def test_band_confidence_is_the_share_of_the_interval_inside_the_band():
    edges = (25_000, 40_000, 60_000)
    low = np.array([30_000, 30_000, 20_000, 50_000, 61_000])
    high = np.array([38_000, 50_000, 30_000, 50_000, 99_000])
    band = np.array([1, 1, 1, 2, 3])
    # Worked by hand: all inside; 10k of 20k; 5k of 10k; no width, inside; open-ended top band.
    np.testing.assert_allclose(band_confidence(low, high, band, edges), [1.0, 0.5, 0.5, 1.0, 1.0])


def test_published_bounds_are_rounded_outwards():
    low, high = widen_to(np.array([31_499.0, 0.0]), np.array([44_001.0, 999.0]), 1_000)
    assert low.tolist() == [31_000.0, 0.0] and high.tolist() == [45_000.0, 1_000.0]


def _decide(X: pd.DataFrame, y: np.ndarray, settings: Settings):
    ev = evaluate(X, y, settings)
    summary = summarise(TrainSummary("r", "2026-10", len(y), len(y), candidates=[]), ev, settings)
    return accuracy_gate(summary, settings)


@pytest.mark.parametrize("seed", range(10))
def test_the_gate_withholds_noise_and_publishes_signal(seed):
    # A fact of the method, not of our code: when income is unrelated to behaviour no model beats the
    # baselines on held-out data, so the gate must withhold; when behaviour strongly drives income it
    # must publish. Ten seeds each, the same settings as production apart from lighter candidates.
    settings = Settings(
        train={
            "numeric_features": ("spend", "balance", "days"),
            "categorical_features": ("region",),
            "candidates": ("linear_regression", "ridge", "decision_tree", "gradient_boosting"),
            "boosting_max_iter": 50,
        }
    )
    rng = np.random.default_rng(1000 + seed)
    n = 400
    X = pd.DataFrame(
        {
            "spend": rng.lognormal(7.5, 0.5, n),
            "balance": rng.lognormal(8, 1, n),
            "days": rng.integers(20, 90, n).astype(float),
            "region": rng.choice(["north", "south", "east"], n),
        }
    )
    unrelated = rng.lognormal(np.log(42_000), 0.45, n)
    related = 12 * X["spend"].to_numpy() * rng.lognormal(0, 0.12, n)

    noise = _decide(X, unrelated, settings)
    assert not noise.passed, noise.reason
    signal = _decide(X, related, settings)
    assert signal.passed, signal.reason
