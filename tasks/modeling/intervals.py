"""Prediction intervals around each estimate, by conformal prediction (MAPIE), and their measured coverage.

Two methods (settings `intervals.method`):
- `cv` (default): MAPIE's cross-conformal regressor with method "base" — the point estimate is the model
  refitted on every labelled customer, and the interval's half-widths are quantiles of out-of-fold
  conformity scores. It uses every customer for both, and its memory is linear in the customers (the
  "plus" variant holds a customers x labelled matrix: 100k x 80k doubles is 64 GB).
- `split`: split conformal — fit on one part, calibrate on a held-out part. Its coverage is guaranteed in
  finite samples for exchangeable data (Lei et al. 2018, JASA 113:1094-1111), at the price of fitting the
  published model on fewer customers.
Neither guarantee reaches customers unlike the labelled ones (the population-shift figures say how
unlike); coverage is therefore measured, on held-out folds, overall, per band and per group.

The conformity score `gamma` makes the width proportional to the estimate (income errors grow with
income); `absolute` gives everyone the same width.

Bounds are floored and rounded by the one rule in `amounts` (band confidence is computed there too).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from mapie.regression import CrossConformalRegressor, SplitConformalRegressor
from sklearn.model_selection import KFold, train_test_split

from ledgerband.tasks.core.settings import Settings
from ledgerband.tasks.modeling.amounts import never_negative
from ledgerband.tasks.modeling.candidates import Floored


@dataclass
class Intervals:
    estimate: np.ndarray
    low: np.ndarray
    high: np.ndarray


def fit_conformal(pipe, X: pd.DataFrame, y: np.ndarray, settings: Settings):
    """A fitted, conformalized MAPIE regressor around (a clone of) `pipe`."""
    iv, t = settings.intervals, settings.train
    estimator = Floored(pipe)
    if iv.method == "split":
        X_fit, X_cal, y_fit, y_cal = train_test_split(
            X, y, test_size=iv.calibration_share, random_state=t.random_state
        )
        model = SplitConformalRegressor(
            estimator, confidence_level=iv.level, conformity_score=iv.conformity_score, prefit=False
        )
        return model.fit(X_fit, y_fit).conformalize(X_cal, y_cal)
    model = CrossConformalRegressor(
        estimator,
        confidence_level=iv.level,
        conformity_score=iv.conformity_score,
        method="base",
        cv=KFold(t.cv_folds, shuffle=True, random_state=t.random_state),
        n_jobs=t.n_jobs,  # the folds' fits on worker processes (each fold's result is the same anywhere)
        random_state=t.random_state,
    )
    return model.fit_conformalize(X, y)


def predict_intervals(model, X: pd.DataFrame) -> Intervals:
    """Point estimates and interval bounds (never below zero)."""
    if isinstance(model, CrossConformalRegressor):
        point, pis = model.predict_interval(X, aggregate_point_predictions=None)  # the full-data model
    else:
        point, pis = model.predict_interval(X)
    low = never_negative(pis[:, 0, 0])
    high = np.maximum(pis[:, 1, 0], low)
    return Intervals(never_negative(point), low, high)


def held_out_intervals(pipe, X: pd.DataFrame, y: np.ndarray, settings: Settings, splits) -> Intervals:
    """Intervals for every labelled customer from a conformal model that never saw them.

    `splits` are one repeat's folds (each customer is held out once); the whole conformal procedure is
    refitted inside each training fold, so the coverage measured is the coverage of what is published.
    """
    est, low, high = (np.full(len(y), np.nan) for _ in range(3))
    for train, test in splits:
        model = fit_conformal(pipe, X.iloc[train], y[train], settings)
        iv = predict_intervals(model, X.iloc[test])
        est[test], low[test], high[test] = iv.estimate, iv.low, iv.high
    return Intervals(est, low, high)


def covered(y: np.ndarray, iv: Intervals) -> np.ndarray:
    return (y >= iv.low) & (y <= iv.high)
