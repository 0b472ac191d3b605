"""Our model comparison, skill bounds and intervals checked against outside references."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from sklearn.base import BaseEstimator, RegressorMixin
from sklearn.metrics import mean_absolute_error, root_mean_squared_error
from sklearn.model_selection import RepeatedKFold
from sklearn.pipeline import Pipeline

from ledgerband.tasks.core.settings import Settings
from ledgerband.tasks.modeling.candidates import compare, lower_bound, make_candidates, preparation

LONGLEY_X = ["GNPDEFL", "GNP", "UNEMP", "ARMED", "POP", "YEAR"]


def _longley():
    from statsmodels.datasets import longley

    data = longley.load_pandas().data
    return data[LONGLEY_X], data["TOTEMP"].to_numpy()


def _settings_for(numeric: list[str], categorical: tuple[str, ...] = (), **train) -> Settings:
    return Settings(
        train={
            "numeric_features": tuple(numeric),
            "categorical_features": categorical,
            "cv_folds": 4,
            "cv_repeats": 2,
            **train,
        }
    )


def test_linear_candidate_reproduces_the_nist_longley_certified_coefficients():
    # Source: NIST StRD, Longley linear regression, certified values (quoted from memory; the data are the
    # copy statsmodels ships, and statsmodels OLS agrees below). Longley is ill-conditioned: a naive
    # solver loses digits here. The linear candidate sees unscaled inputs, so its coefficients are the
    # certified ones themselves.
    certified = {
        "GNPDEFL": 15.0618722713733,
        "GNP": -0.358191792925910e-01,
        "UNEMP": -2.02022980381683,
        "ARMED": -1.03322686717359,
        "POP": -0.511041056535807e-01,
        "YEAR": 1829.15146461355,
    }
    certified_intercept = -3482258.63459582
    certified_residual_sd = 304.854073561965
    X, y = _longley()
    pipe = make_candidates(_settings_for(LONGLEY_X))["linear_regression"].fit(X, y)
    model = pipe.named_steps["model"]
    np.testing.assert_allclose(model.coef_, [certified[c] for c in LONGLEY_X], rtol=1e-8)
    assert model.intercept_ == pytest.approx(certified_intercept, rel=1e-8)
    fitted = pipe.predict(X)
    residual_sd = np.sqrt(np.sum((y - fitted) ** 2) / (len(y) - len(LONGLEY_X) - 1))
    assert residual_sd == pytest.approx(certified_residual_sd, rel=1e-8)


def test_linear_candidate_matches_statsmodels_ols():
    # Reference library: statsmodels OLS on the same data.
    import statsmodels.api as sm

    X, y = _longley()
    ols = sm.OLS(y, sm.add_constant(X)).fit()
    pipe = make_candidates(_settings_for(LONGLEY_X))["linear_regression"].fit(X, y)
    np.testing.assert_allclose(pipe.predict(X), ols.fittedvalues, rtol=1e-9)


class _Recorder(RegressorMixin, BaseEstimator):
    """Remembers which customers it was fitted on (by their unique labels) in a class-wide log.

    The log is on the class: `clone` deep-copies parameters, so a list passed in would not be shared."""

    log: list = []

    def __init__(self, name: str = ""):
        self.name = name

    def fit(self, X, y):
        _Recorder.log.append((self.name, tuple(np.sort(y))))
        self.mean_ = float(np.mean(y))
        return self

    def predict(self, X):
        return np.full(len(X), self.mean_)


@pytest.mark.parametrize("shared_preparation", [True, False])
def test_every_candidate_is_fitted_on_identical_splits(shared_preparation):
    # Would fail if one candidate drew its own splits: each fit's training customers are recorded (each
    # customer's label is unique). Both paths: Pipelines sharing a preparation, and bare estimators.
    rng = np.random.default_rng(3)
    X = pd.DataFrame({"a": rng.normal(size=50), "region": rng.choice(["N", "S"], 50)})
    y = rng.permutation(np.arange(30_000.0, 30_050.0))
    s = _settings_for(["a"], ("region",), n_jobs=1)  # the recorder's log is this process's
    _Recorder.log.clear()
    names = ("first", "second", "third")
    if shared_preparation:
        candidates = {
            n: Pipeline([("prepare", preparation(s.train)), ("model", _Recorder(n))]) for n in names
        }
    else:
        candidates = {n: _Recorder(n) for n in names}
    result = compare(X, y, s, candidates)
    by_candidate = {name: [rows for n, rows in _Recorder.log if n == name] for name in names}
    assert len(by_candidate["first"]) == 8  # 4 folds x 2 repeats
    assert by_candidate["first"] == by_candidate["second"] == by_candidate["third"]
    # And they are the splits scikit-learn's RepeatedKFold yields for the configured seed.
    expected = RepeatedKFold(n_splits=4, n_repeats=2, random_state=s.train.random_state).split(X)
    assert by_candidate["first"] == [tuple(np.sort(y[train])) for train, _ in expected]
    assert set(result.results) == set(names)


def test_shared_preparation_gives_the_same_scores_as_whole_pipelines():
    # The shortcut (prepare once per split) must equal fitting each scikit-learn Pipeline on its own.
    rng = np.random.default_rng(5)
    X = pd.DataFrame(
        {"a": rng.normal(size=80), "b": rng.normal(size=80), "region": rng.choice(["N", "S"], 80)}
    )
    X.loc[::7, "b"] = np.nan
    y = 45_000 + 9_000 * X["a"].to_numpy() + rng.normal(0, 4_000, 80)
    s = _settings_for(["a", "b"], ("region",), candidates=("linear_regression", "decision_tree"))
    fast = compare(X, y, s)
    whole = compare(X, y, s, {n: Pipeline([("only", p)]) for n, p in make_candidates(s).items()})
    for name, r in fast.results.items():
        np.testing.assert_allclose(r.mae, whole.results[name].mae, rtol=1e-10)
        np.testing.assert_allclose(r.oof, whole.results[name].oof, rtol=1e-10)


def test_splits_on_worker_processes_score_as_one_after_another():
    # train.n_jobs > 1 runs the comparison's splits on worker processes (joblib's loky backend, each worker
    # with its share of the cores' threads). Every split is seeded, so the figures must be the very same.
    rng = np.random.default_rng(8)
    X = pd.DataFrame(
        {"a": rng.normal(size=300), "b": rng.lognormal(size=300), "region": rng.choice(["N", "S", "E"], 300)}
    )
    y = 40_000 + 8_000 * X["a"].to_numpy() + 3_000 * X["b"].to_numpy() + rng.normal(0, 5_000, 300)
    common = {"forest_trees": 8, "boosting_max_iter": 20}
    here = compare(X, y, _settings_for(["a", "b"], ("region",), n_jobs=1, **common))
    there = compare(X, y, _settings_for(["a", "b"], ("region",), n_jobs=2, **common))
    assert set(here.results) == set(there.results) and len(here.results) == 7  # 5 candidates, 2 baselines
    for name, r in here.results.items():
        for metric in ("rmse", "mae", "band_accuracy", "within_one_band", "oof"):
            assert np.array_equal(getattr(r, metric), getattr(there.results[name], metric), equal_nan=True)


def test_cv_figures_are_the_textbook_rmse_mae_and_band_accuracy():
    # Reference: RMSE = sqrt(mean((y - yhat)^2)), MAE = mean(|y - yhat|) (scikit-learn's documented metric
    # functions), band accuracy = share in the same half-open band; recomputed with numpy on the
    # splits RepeatedKFold yields; the mean baseline predicts the training fold's mean.
    rng = np.random.default_rng(0)
    X = pd.DataFrame(
        {"a": rng.normal(size=60), "b": rng.normal(size=60), "region": rng.choice(["N", "S"], 60)}
    )
    y = 40_000 + 12_000 * X["a"].to_numpy() + rng.normal(0, 3_000, 60)
    s = _settings_for(["a", "b"], ("region",), candidates=("linear_regression",))
    result = compare(X, y, s)
    cv = RepeatedKFold(n_splits=4, n_repeats=2, random_state=s.train.random_state)
    edges = np.array(s.bands.edges)
    rmse, mae, acc = [], [], []
    for train_idx, test_idx in cv.split(X):
        pred = np.full(len(test_idx), y[train_idx].mean())
        rmse.append(np.sqrt(np.mean((y[test_idx] - pred) ** 2)))
        mae.append(np.mean(np.abs(y[test_idx] - pred)))
        acc.append(
            np.mean(np.searchsorted(edges, y[test_idx], "right") == np.searchsorted(edges, pred, "right"))
        )
    base = result.results["baseline_mean"]
    np.testing.assert_allclose(base.rmse, rmse, rtol=1e-12)
    np.testing.assert_allclose(base.mae, mae, rtol=1e-12)
    np.testing.assert_allclose(base.band_accuracy, acc, rtol=1e-12)
    # The linear signal: the linear candidate is the champion and beats predicting the mean by far.
    assert result.champion == "linear_regression"
    assert result.results["linear_regression"].mean("rmse") < 0.6 * base.mean("rmse")


def test_sklearn_documented_error_examples():
    # Source: scikit-learn API docs for mean_absolute_error and root_mean_squared_error, example
    # y_true = [3, -0.5, 2, 7], y_pred = [2.5, 0.0, 2, 8] -> MAE 0.5, RMSE sqrt(0.375).
    y_true, y_pred = [3, -0.5, 2, 7], [2.5, 0.0, 2, 8]
    assert mean_absolute_error(y_true, y_pred) == pytest.approx(0.5)
    assert root_mean_squared_error(y_true, y_pred) == pytest.approx(np.sqrt(0.375))


def test_corrected_resampled_t_bound():
    # Source: Nadeau & Bengio (2003), Machine Learning 52:239-281: the corrected resampled t replaces the
    # 1/J variance factor by 1/J + n_test/n_train. With n_test/n_train -> 0 it must equal the ordinary
    # one-sided t bound, computed here by scipy's t interval (two-sided 90% = one-sided 95%).
    from scipy import stats

    values = np.array([0.31, 0.28, 0.35, 0.30, 0.26, 0.33, 0.29, 0.32, 0.27, 0.34])
    plain = stats.t.interval(0.90, df=9, loc=values.mean(), scale=stats.sem(values))[0]
    assert lower_bound(values, 1e-12, 0.95).lower == pytest.approx(plain, rel=1e-9)
    # Five folds: the variance grows by (1/10 + 1/4) / (1/10) = 3.5, the half-width by sqrt(3.5).
    corrected = lower_bound(values, 0.2, 0.95)
    assert values.mean() - corrected.lower == pytest.approx((values.mean() - plain) * np.sqrt(3.5), rel=1e-9)


@pytest.mark.parametrize("log_target", [False, True])
def test_every_candidate_saves_and_reloads_with_the_trusted_types(tmp_path, log_target):
    # skops refuses types outside its allow-list: our list must cover every candidate we may save, and a
    # reloaded model must predict what it predicted before, to the last bits (skops docs: sio.dump / load).
    import skops.io as sio

    from ledgerband.tasks.ingest.extract_contract import sha256_file
    from ledgerband.tasks.modeling.candidates import final_model
    from ledgerband.tasks.modeling.train import load_model

    rng = np.random.default_rng(9)
    s = Settings(train={"log_target": log_target})
    X = pd.DataFrame({f: rng.lognormal(3, 1, 300) for f in s.train.numeric_features})
    for f in s.train.categorical_features:
        X[f] = rng.choice(["a", "b", "c"], 300)
    y = 30_000 * np.exp(0.3 * np.log(X[s.train.numeric_features[0]])) * rng.lognormal(0, 0.1, 300)
    for name, pipe in make_candidates(s).items():
        model = final_model(pipe.fit(X, y))
        path = tmp_path / f"{name}.skops"
        sio.dump(model, path)
        again = load_model(path, sha256_file(path))
        np.testing.assert_allclose(again.predict(X), model.predict(X), rtol=1e-12)  # threads may reorder sums
        if log_target and name not in ("baseline_mean", "baseline_median"):
            assert (model.predict(X) > 0).all()  # back-transformed from the log scale


def test_the_forest_estimates_the_same_on_every_call_and_as_scikit_learn_in_one_thread():
    """Reference: scikit-learn's RandomForestRegressor predicting in one thread (trees summed in order).
    Fitted on two threads, our forest's estimates equal that bit for bit on every call; scikit-learn's own
    two-thread predict need not (its threads add into one array in the order they finish)."""
    from sklearn.datasets import make_regression
    from sklearn.ensemble import RandomForestRegressor

    from ledgerband.tasks.modeling.candidates import SteadyForest

    X, y = make_regression(3000, 12, noise=10, random_state=0)
    args = {"n_estimators": 60, "max_samples": 0.5, "min_samples_leaf": 5, "random_state": 1}
    ours = SteadyForest(n_jobs=2, **args).fit(X, y)
    reference = RandomForestRegressor(n_jobs=2, **args).fit(X, y)
    reference.n_jobs = 1
    expected = reference.predict(X)
    assert all(np.array_equal(ours.predict(X), expected) for _ in range(10))
    assert ours.n_jobs == 2  # predicting leaves the fitted forest's settings as they were


def test_the_forest_grows_each_tree_on_at_most_max_tree_rows_and_is_otherwise_scikit_learns():
    """Reference: scikit-learn's RandomForestRegressor with max_samples given as that number of rows.
    Above the bound our forest is that forest exactly (same bootstrap draws, same estimates); below it,
    the bound changes nothing. Each tree's root holds its bootstrap draw (weighted_n_node_samples)."""
    from sklearn.base import clone
    from sklearn.datasets import make_regression
    from sklearn.ensemble import RandomForestRegressor

    from ledgerband.tasks.modeling.candidates import SteadyForest

    X, y = make_regression(2000, 8, noise=10, random_state=0)
    args = {"n_estimators": 20, "min_samples_leaf": 5, "random_state": 3, "n_jobs": 1}
    bounded = SteadyForest(max_samples=0.5, max_tree_rows=300, **args).fit(X, y)
    reference = RandomForestRegressor(max_samples=300, **args).fit(X, y)
    assert {t.tree_.weighted_n_node_samples[0] for t in bounded.estimators_} == {300.0}
    assert np.array_equal(bounded.predict(X), reference.predict(X))
    assert bounded.max_samples == 0.5 and bounded.tree_rows(2000) == 300  # the setting is left as it was
    assert bounded.bounded_tree_rows_ == 300  # what the report reads
    assert clone(bounded).get_params()["max_tree_rows"] == 300  # a parameter scikit-learn sees

    loose = SteadyForest(max_samples=0.5, max_tree_rows=5000, **args).fit(X, y)
    plain = RandomForestRegressor(max_samples=0.5, **args).fit(X, y)
    assert {t.tree_.weighted_n_node_samples[0] for t in loose.estimators_} == {1000.0}
    assert np.array_equal(loose.predict(X), plain.predict(X))
    assert loose.bounded_tree_rows_ is None
