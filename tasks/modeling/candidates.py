"""Candidate models and their comparison on shared repeated cross-validation splits.

Pure functions of a feature frame and the labels (no warehouse), so the comparison, the skill bounds
and the decision they feed can be tested on data whose answer is known.

Every candidate is a Pipeline behind the same preparation (one-hot categories, median-imputed numbers);
a model that needs scaled inputs scales them itself, so the linear path sees the raw values and its
coefficients are the textbook ones. All candidates are scored on one list of splits, made once, so the
comparison is paired. Per split: RMSE, MAE, band accuracy and the within-one-band rate.

Skill is judged on a lower confidence bound across the splits. Repeated k-fold splits share training
rows, so their scores are correlated and the plain standard error is too small; the bound uses the
corrected resampled t of Nadeau & Bengio (2003, Machine Learning 52:239-281): variance multiplied by
(1/J + n_test/n_train) instead of 1/J, with J-1 degrees of freedom.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from joblib import Parallel, delayed
from scipy import stats
from sklearn.base import BaseEstimator, RegressorMixin, clone
from sklearn.compose import ColumnTransformer, TransformedTargetRegressor
from sklearn.dummy import DummyRegressor
from sklearn.ensemble import HistGradientBoostingRegressor, RandomForestRegressor
from sklearn.impute import SimpleImputer
from sklearn.linear_model import LinearRegression, RidgeCV
from sklearn.metrics import mean_absolute_error, root_mean_squared_error
from sklearn.model_selection import GridSearchCV, KFold, RepeatedKFold, train_test_split
from sklearn.pipeline import Pipeline
from sklearn.preprocessing import OneHotEncoder, StandardScaler
from sklearn.tree import DecisionTreeRegressor

from ledgerband.tasks.core.settings import Settings, TrainSettings
from ledgerband.tasks.modeling.amounts import CONFORMAL_FLOOR, never_negative
from ledgerband.tasks.modeling.bands import assign_band_index

BASELINES = ("baseline_mean", "baseline_median")


def preparation(t: TrainSettings) -> ColumnTransformer:
    """The preparation every candidate shares: one-hot categories, median-imputed numbers (unscaled)."""
    return ColumnTransformer(
        [
            (
                "categorical",
                OneHotEncoder(handle_unknown="ignore", sparse_output=False),
                list(t.categorical_features),
            ),
            ("numeric", SimpleImputer(strategy="median"), list(t.numeric_features)),
        ]
    )


def _model(name: str, t: TrainSettings):
    rs = t.random_state
    if name == "linear_regression":
        return LinearRegression()
    if name == "ridge":
        # Penalised: needs comparable scales. RidgeCV picks the penalty by efficient leave-one-out.
        return Pipeline([("scale", StandardScaler()), ("ridge", RidgeCV(alphas=np.logspace(-3, 3, 13)))])
    if name == "decision_tree":
        # Depth chosen by inner 3-fold CV within each training fold (nested: no peeking at the test fold).
        return GridSearchCV(
            DecisionTreeRegressor(min_samples_leaf=t.tree_min_samples_leaf, random_state=rs),
            {"max_depth": list(t.tree_depths)},
            cv=KFold(3, shuffle=True, random_state=rs),
            scoring="neg_mean_absolute_error",
        )
    if name == "random_forest":
        return SteadyForest(
            n_estimators=t.forest_trees,
            min_samples_leaf=5,
            max_features=0.5,
            max_samples=t.forest_max_samples,
            max_tree_rows=t.forest_max_tree_rows,
            n_jobs=t.n_jobs,
            random_state=rs,
        )
    if name == "gradient_boosting":
        return HistGradientBoostingRegressor(max_iter=t.boosting_max_iter, random_state=rs)
    raise ValueError(f"unknown candidate {name!r}")


class SteadyForest(RandomForestRegressor):
    """A random forest whose estimates are the same on every run.

    Fitting runs on `n_jobs` threads and is reproducible (each tree has its own seed). Predicting on
    several threads is not: scikit-learn adds the trees' estimates into one array in whatever order its
    threads finish, so the last bits of the mean change from call to call (19 of 20 calls on one fitted
    forest differed, measured here). This forest sums its trees in one thread, in tree order.

    `max_tree_rows` bounds the rows each tree is grown on (its bootstrap draw): `max_samples` as a
    fraction grows with the bank, and at a million customers the final refit on half of 745k rows per
    tree took most of the training stage. Below the bound it changes nothing. The parameters are spelled
    out because scikit-learn reads an estimator's parameters from its __init__ signature.
    """

    def __init__(
        self,
        n_estimators=100,
        *,
        criterion="squared_error",
        max_depth=None,
        min_samples_split=2,
        min_samples_leaf=1,
        min_weight_fraction_leaf=0.0,
        max_features=1.0,
        max_leaf_nodes=None,
        min_impurity_decrease=0.0,
        bootstrap=True,
        oob_score=False,
        n_jobs=None,
        random_state=None,
        verbose=0,
        warm_start=False,
        ccp_alpha=0.0,
        max_samples=None,
        monotonic_cst=None,
        max_tree_rows=None,
    ):
        super().__init__(
            n_estimators,
            criterion=criterion,
            max_depth=max_depth,
            min_samples_split=min_samples_split,
            min_samples_leaf=min_samples_leaf,
            min_weight_fraction_leaf=min_weight_fraction_leaf,
            max_features=max_features,
            max_leaf_nodes=max_leaf_nodes,
            min_impurity_decrease=min_impurity_decrease,
            bootstrap=bootstrap,
            oob_score=oob_score,
            n_jobs=n_jobs,
            random_state=random_state,
            verbose=verbose,
            warm_start=warm_start,
            ccp_alpha=ccp_alpha,
            max_samples=max_samples,
            monotonic_cst=monotonic_cst,
        )
        self.max_tree_rows = max_tree_rows

    def drawn_rows(self, n_rows: int) -> int:
        """How many rows scikit-learn's own rule draws for each tree of a fit on n_rows."""
        if not self.bootstrap:
            return n_rows
        m = self.max_samples
        return n_rows if m is None else (max(round(n_rows * m), 1) if isinstance(m, float) else int(m))

    def tree_rows(self, n_rows: int) -> int:
        """How many rows each tree is grown on for a fit on n_rows (scikit-learn's rule, then the bound)."""
        rows = self.drawn_rows(n_rows)
        return min(rows, self.max_tree_rows) if self.max_tree_rows else rows

    def fit(self, X, y, sample_weight=None):
        fraction = self.max_samples
        rows = self.tree_rows(len(X))
        # The fitted forest says whether the bound applied (the report reads it): the row count, or None.
        self.bounded_tree_rows_ = rows if rows < self.drawn_rows(len(X)) else None
        if self.bounded_tree_rows_:
            self.max_samples = rows  # an absolute count for this fit, then the setting as it was
        try:
            return super().fit(X, y, sample_weight=sample_weight)
        finally:
            self.max_samples = fraction

    def predict(self, X):
        n_jobs, self.n_jobs = self.n_jobs, 1
        try:
            return super().predict(X)
        finally:
            self.n_jobs = n_jobs


def make_candidates(settings: Settings) -> dict[str, Pipeline]:
    """The two baselines, then the configured candidates, each behind the shared preparation."""
    t = settings.train
    models: dict[str, object] = {
        "baseline_mean": DummyRegressor(strategy="mean"),
        "baseline_median": DummyRegressor(strategy="quantile", quantile=0.5),
    }
    for name in t.candidates:
        model = _model(name, t)
        if t.log_target:
            model = TransformedTargetRegressor(regressor=model, func=np.log1p, inverse_func=np.expm1)
        models[name] = model
    return {name: Pipeline([("prepare", preparation(t)), ("model", m)]) for name, m in models.items()}


class Floored(RegressorMixin, BaseEstimator):
    """An estimator whose predictions never fall below `floor` (an income is never below zero).

    Conformal scores proportional to the estimate (MAPIE's gamma score) need strictly positive estimates.
    """

    def __init__(self, estimator, floor: float = CONFORMAL_FLOOR):
        self.estimator = estimator
        self.floor = floor

    def fit(self, X, y, **fit_params):
        self.estimator_ = clone(self.estimator).fit(X, y, **fit_params)
        self.fitted_ = True  # the attribute MAPIE looks for to tell a fitted estimator
        return self

    def predict(self, X):
        return np.maximum(self.estimator_.predict(X), self.floor)


def cv_splits(n: int, t: TrainSettings) -> list[tuple[np.ndarray, np.ndarray]]:
    """The one list of (train, test) index pairs every candidate is scored on: repeat-major order."""
    cv = RepeatedKFold(n_splits=t.cv_folds, n_repeats=t.cv_repeats, random_state=t.random_state)
    return list(cv.split(np.zeros((n, 1))))


def comparison_sample(y: np.ndarray, edges, cap: int, seed: int) -> np.ndarray:
    """Positions of the labelled customers the comparison runs on: all, or a band-stratified sample."""
    n = len(y)
    if n <= cap:
        return np.arange(n)
    bands = assign_band_index(y, edges)
    counts = np.bincount(bands)
    stratify = bands if counts[counts > 0].min() >= 2 else None
    sample, _ = train_test_split(np.arange(n), train_size=cap, stratify=stratify, random_state=seed)
    return np.sort(sample)


@dataclass
class CandidateResult:
    """One candidate's scores on every split, and its out-of-fold estimates per repeat."""

    name: str
    rmse: np.ndarray
    mae: np.ndarray
    band_accuracy: np.ndarray
    within_one_band: np.ndarray
    oof: np.ndarray = field(repr=False)  # shape (repeats, n): every customer's estimate when held out

    def mean(self, metric: str) -> float:
        return float(np.mean(getattr(self, metric)))

    def std(self, metric: str) -> float:
        values = getattr(self, metric)
        return float(np.std(values, ddof=1)) if len(values) > 1 else 0.0

    def figures(self) -> dict:
        """Mean (and sd) of every figure across the splits: what ml.model_runs and the summary show."""
        return {
            "rmse_mean": self.mean("rmse"),
            "rmse_std": self.std("rmse"),
            "mae_mean": self.mean("mae"),
            "mae_std": self.std("mae"),
            "band_accuracy_mean": self.mean("band_accuracy"),
            "within_one_band_mean": self.mean("within_one_band"),
        }


@dataclass
class Comparison:
    results: dict[str, CandidateResult]
    splits: list[tuple[np.ndarray, np.ndarray]] = field(repr=False)
    folds: int
    repeats: int

    @property
    def champion(self) -> str:
        """The candidate (not a baseline) with the lowest mean MAE; a baseline when there is none."""
        models = [r for n, r in self.results.items() if n not in BASELINES] or list(self.results.values())
        return min(models, key=lambda r: r.mean("mae")).name

    def best_baseline(self, metric: str, higher_is_better: bool) -> str:
        pick = max if higher_is_better else min
        return pick(
            (self.results[b] for b in BASELINES if b in self.results), key=lambda r: r.mean(metric)
        ).name


def _shared_preparation(candidates: dict) -> ColumnTransformer | None:
    """The preparation step all candidates share, when they do (then it is fitted once per split)."""
    pipes = list(candidates.values())
    if not pipes or not all(
        isinstance(p, Pipeline) and list(p.named_steps) == ["prepare", "model"] for p in pipes
    ):
        return None
    first = pipes[0].named_steps["prepare"]
    same = all(repr(p.named_steps["prepare"].get_params()) == repr(first.get_params()) for p in pipes)
    return first if same else None


@dataclass(frozen=True)
class SplitJob:
    """One split's work, picklable (it may run on a Dask worker): fit every candidate, score the test fold."""

    X: pd.DataFrame
    y: np.ndarray
    train: np.ndarray
    test: np.ndarray
    candidates: dict
    shared: ColumnTransformer | None
    edges: tuple[float, ...]


def score_split(job: SplitJob) -> dict[str, tuple[np.ndarray, np.ndarray]]:
    """Per candidate: (rmse, mae, band accuracy, within one band) on the split's test fold, and its estimates."""
    y, train, test = job.y, job.train, job.test
    X_train, X_test = job.X.iloc[train], job.X.iloc[test]
    if job.shared is not None:
        prepare = clone(job.shared).fit(X_train)
        X_train, X_test = prepare.transform(X_train), prepare.transform(X_test)
    true_band = assign_band_index(y[test], job.edges)
    out = {}
    for name, pipe in job.candidates.items():
        model = clone(pipe.named_steps["model"] if job.shared is not None else pipe)
        pred = never_negative(model.fit(X_train, y[train]).predict(X_test))
        pred_band = assign_band_index(pred, job.edges)
        figures = np.array(
            [
                root_mean_squared_error(y[test], pred),
                mean_absolute_error(y[test], pred),
                np.mean(pred_band == true_band),
                np.mean(np.abs(pred_band - true_band) <= 1),
            ]
        )
        out[name] = (figures, pred)
    return out


def _one_after_another(fn, jobs: list) -> list:
    return [fn(job) for job in jobs]


def in_processes(n_jobs: int):
    """A mapper running jobs on `n_jobs` worker processes of this machine (joblib's loky backend, which
    gives each worker 1/n_jobs of the cores for its own threads); one after another when n_jobs is 1.
    Each split is seeded, so the results do not depend on where it ran (a test compares)."""
    if n_jobs <= 1:
        return _one_after_another

    def mapper(fn, jobs: list) -> list:
        return Parallel(n_jobs=n_jobs)(delayed(fn)(job) for job in jobs)

    return mapper


def compare(
    X: pd.DataFrame,
    y: np.ndarray,
    settings: Settings,
    candidates: dict[str, BaseEstimator] | None = None,
    mapper=None,
) -> Comparison:
    """Fit and score every candidate on the same repeated k-fold splits.

    When every candidate is a `prepare` + `model` Pipeline with the same preparation (as made by
    `make_candidates`), the preparation is fitted once per split and each model on its output: the same
    result as fitting each Pipeline, without repeating the one-hot encoding and imputation per model.
    `mapper(fn, jobs)` runs the splits (default: on train.n_jobs processes of this machine; the Dask runner
    maps them onto its cluster); every split is independent and seeded, so where it runs does not change
    its result.
    """
    t, edges = settings.train, settings.bands.edges
    y = np.asarray(y, dtype=float)
    candidates = candidates if candidates is not None else make_candidates(settings)
    splits = cv_splits(len(y), t)
    shared = _shared_preparation(candidates)
    n_splits = len(splits)
    jobs = [SplitJob(X, y, train, test, candidates, shared, tuple(edges)) for train, test in splits]
    done = (mapper or in_processes(t.n_jobs))(score_split, jobs)
    scores = {name: np.empty((4, n_splits)) for name in candidates}  # rmse, mae, band acc, within one
    oof = {name: np.full((t.cv_repeats, len(y)), np.nan) for name in candidates}
    for i, ((_, test), result) in enumerate(zip(splits, done, strict=True)):
        for name, (figures, pred) in result.items():
            scores[name][:, i] = figures
            oof[name][i // t.cv_folds, test] = pred
    results = {name: CandidateResult(name, *scores[name], oof[name]) for name in candidates}
    return Comparison(results, splits, t.cv_folds, t.cv_repeats)


@dataclass(frozen=True)
class Bound:
    """A figure's mean across the splits and its one-sided lower confidence bound."""

    mean: float
    lower: float

    def as_dict(self) -> dict[str, float]:
        return {"mean": self.mean, "lower_bound": self.lower}


def lower_bound(values: np.ndarray, test_share: float, confidence: float) -> Bound:
    """Corrected resampled t lower bound (Nadeau & Bengio 2003) for a mean over correlated CV splits."""
    values = np.asarray(values, dtype=float)
    j = len(values)
    mean = float(np.mean(values))
    if j < 2 or not np.isfinite(values).all():
        return Bound(mean, float("nan"))
    corrected_var = np.var(values, ddof=1) * (1 / j + test_share / (1 - test_share))
    t_crit = stats.t.ppf(confidence, df=j - 1)
    return Bound(mean, float(mean - t_crit * np.sqrt(corrected_var)))


@dataclass(frozen=True)
class Skill:
    """The champion's skill over the best baseline, per split and bounded."""

    champion: str
    mae_baseline: str
    band_baseline: str
    mae_skill: Bound
    band_skill: Bound
    band_accuracy: Bound
    within_one_band: float
    baseline_band_accuracy: float
    per_split_mae_skill: list[float]
    per_split_band_skill: list[float]


def skill(comparison: Comparison, confidence: float) -> Skill:
    """MAE skill and band-accuracy skill of the champion over the strongest baseline for each figure.

    MAE skill = 1 - MAE / MAE(baseline); band skill = (accuracy - baseline's) / (1 - baseline's), the
    share of the baseline's misplaced customers the model places right (a skill score in the forecast-
    verification sense: 0 is no better than the reference, 1 is perfect).
    """
    r = comparison.results
    champ = r[comparison.champion]
    mae_base = r[comparison.best_baseline("mae", higher_is_better=False)]
    band_base = r[comparison.best_baseline("band_accuracy", higher_is_better=True)]
    test_share = 1 / comparison.folds
    mae_skill = 1 - champ.mae / mae_base.mae
    with np.errstate(divide="ignore", invalid="ignore"):
        band_skill = (champ.band_accuracy - band_base.band_accuracy) / (1 - band_base.band_accuracy)
    return Skill(
        champion=champ.name,
        mae_baseline=mae_base.name,
        band_baseline=band_base.name,
        mae_skill=lower_bound(mae_skill, test_share, confidence),
        band_skill=lower_bound(band_skill, test_share, confidence),
        band_accuracy=lower_bound(champ.band_accuracy, test_share, confidence),
        within_one_band=champ.mean("within_one_band"),
        baseline_band_accuracy=band_base.mean("band_accuracy"),
        per_split_mae_skill=mae_skill.tolist(),
        per_split_band_skill=band_skill.tolist(),
    )


def bounded_tree_rows(pipe: Pipeline) -> int | None:
    """The rows each tree of a fitted forest champion was grown on, when `max_tree_rows` bound them."""
    model = pipe.named_steps["model"]
    model = getattr(model, "regressor_", model)  # behind log_target's TransformedTargetRegressor
    return getattr(model, "bounded_tree_rows_", None) if isinstance(model, SteadyForest) else None


def final_model(pipe: Pipeline) -> Pipeline:
    """The refitted champion as it is saved: a tuned tree is replaced by the tree it chose."""
    model = pipe.named_steps["model"]
    if isinstance(model, GridSearchCV):
        return Pipeline([("prepare", pipe.named_steps["prepare"]), ("model", model.best_estimator_)])
    if isinstance(model, TransformedTargetRegressor) and isinstance(model.regressor_, GridSearchCV):
        model.regressor = model.regressor_ = model.regressor_.best_estimator_
    return pipe
