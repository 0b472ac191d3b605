"""Train: compare candidate models of annual salary by repeated k-fold cross-validation.

Labelled customers are those whose salary is paid here (features.customer_salary). Every candidate is a
Pipeline (one-hot encoding for categories, median imputation and scaling for numbers, then the model)
and is scored on the same splits, so the comparison is paired. The champion (lowest mean RMSE) is
refitted on all labelled customers and estimates every customer; its out-of-fold estimates give the
band metrics the accuracy gate reads.
"""

from __future__ import annotations

import json
import subprocess
from dataclasses import asdict, dataclass, field
from datetime import datetime
from pathlib import Path

import duckdb
import numpy as np
import pandas as pd
from prefect import task
from prefect.cache_policies import NO_CACHE
from sklearn.compose import ColumnTransformer
from sklearn.dummy import DummyRegressor
from sklearn.impute import SimpleImputer
from sklearn.linear_model import LinearRegression
from sklearn.model_selection import KFold, RepeatedKFold, cross_val_predict, cross_validate
from sklearn.pipeline import Pipeline
from sklearn.preprocessing import OneHotEncoder, StandardScaler
from sklearn.tree import DecisionTreeRegressor

from ledgerband.tasks.bands import band_agreement, income_to_publish
from ledgerband.tasks.context import RunContext
from ledgerband.tasks.settings import Settings
from ledgerband.tasks.warehouse import open_warehouse

BASELINE = "baseline_mean"
SCORING = {"rmse": "neg_root_mean_squared_error", "mae": "neg_mean_absolute_error"}


@dataclass
class CandidateScore:
    name: str
    rmse_mean: float
    rmse_std: float
    mae_mean: float
    mae_std: float
    rmse_by_split: list[float] = field(repr=False)
    mae_by_split: list[float] = field(repr=False)


def make_candidates(settings: Settings) -> dict[str, Pipeline]:
    """The candidate models, each behind the same preprocessing."""
    t = settings.train

    def pipe(model) -> Pipeline:
        pre = ColumnTransformer(
            [
                ("categorical", OneHotEncoder(handle_unknown="ignore"), list(t.categorical_features)),
                (
                    "numeric",
                    Pipeline([("impute", SimpleImputer(strategy="median")), ("scale", StandardScaler())]),
                    list(t.numeric_features),
                ),
            ]
        )
        return Pipeline([("prepare", pre), ("model", model)])

    return {
        BASELINE: pipe(DummyRegressor(strategy="mean")),
        "linear_regression": pipe(LinearRegression()),
        "decision_tree": pipe(
            DecisionTreeRegressor(
                max_depth=t.tree_max_depth,
                min_samples_leaf=t.tree_min_samples_leaf,
                random_state=t.random_state,
            )
        ),
    }


def model_frame(con: duckdb.DuckDBPyConnection) -> pd.DataFrame:
    """Every customer's features with the observed annual salary (null when not paid here)."""
    return con.sql(
        """
        select c.*, s.annual_salary, l.annual_pension
        from features.customer as c
        left join features.customer_salary as s using (customer_id)
        left join features.customer_label as l using (customer_id)
        order by c.customer_id
        """
    ).df()


def compare_candidates(X: pd.DataFrame, y: np.ndarray, settings: Settings) -> list[CandidateScore]:
    """Repeated k-fold CV of every candidate on identical splits."""
    t = settings.train
    scores = []
    for name, pipe in make_candidates(settings).items():
        cv = RepeatedKFold(n_splits=t.cv_folds, n_repeats=t.cv_repeats, random_state=t.random_state)
        res = cross_validate(pipe, X, y, cv=cv, scoring=SCORING, n_jobs=1)
        rmse, mae = -res["test_rmse"], -res["test_mae"]
        scores.append(
            CandidateScore(
                name,
                float(rmse.mean()),
                float(rmse.std(ddof=1)),
                float(mae.mean()),
                float(mae.std(ddof=1)),
                rmse.tolist(),
                mae.tolist(),
            )
        )
    return scores


def code_version() -> dict[str, str]:
    """The installed package version and, when it runs from a git checkout, the commit."""
    from importlib.metadata import PackageNotFoundError, version

    try:
        package = version("ledgerband")
    except PackageNotFoundError:  # pragma: no cover - always installed, even editable
        package = "unknown"
    sha = "unknown"
    try:
        out = subprocess.run(
            ["git", "rev-parse", "HEAD"], cwd=Path(__file__).parent, capture_output=True, text=True, timeout=5
        )
        if out.returncode == 0:
            sha = out.stdout.strip()
    except (OSError, subprocess.SubprocessError):
        pass
    return {"package_version": package, "git_sha": sha}


@dataclass
class TrainSummary:
    run_id: str
    period: str
    n_customers: int
    n_labelled: int
    candidates: list[dict]
    champion: str | None = None
    model_version: str | None = None
    model_path: str | None = None
    baseline_rmse: float | None = None
    champion_rmse: float | None = None
    champion_mae: float | None = None
    skill_over_baseline: float | None = None
    band_accuracy: float | None = None
    within_one_band: float | None = None
    note: str | None = None


def train_and_predict(con: duckdb.DuckDBPyConnection, ctx: RunContext) -> TrainSummary:
    """Compare candidates, refit the champion, store scores and every customer's estimate in ml.*."""
    settings, run_id, period = ctx.settings, ctx.run_id, str(ctx.period)
    t = settings.train
    frame = model_frame(con)
    features = list(t.numeric_features) + list(t.categorical_features)
    labelled = frame[frame["annual_salary"].notna()]
    X, y = labelled[features], labelled["annual_salary"].to_numpy(dtype=float)
    summary = TrainSummary(run_id, period, len(frame), len(labelled), candidates=[])
    for table in ("ml.model_runs", "ml.cv_scores", "ml.predictions"):
        con.execute(f"delete from {table} where run_id = ?", [run_id])
    if len(labelled) < 2 * t.cv_folds:
        summary.note = (
            f"only {len(labelled)} labelled customers: too few to cross-validate with {t.cv_folds} folds"
        )
        return summary

    scores = compare_candidates(X, y, settings)
    by_name = {s.name: s for s in scores}
    champion = min(scores, key=lambda s: s.rmse_mean)
    baseline = by_name[BASELINE]
    pipe = make_candidates(settings)[champion.name]
    oof = cross_val_predict(pipe, X, y, cv=KFold(t.cv_folds, shuffle=True, random_state=t.random_state))
    oof = np.clip(oof, 0, None)
    bands = band_agreement(y, oof, settings.bands.edges)
    pipe.fit(X, y)
    # An income cannot be negative; a linear model can extrapolate below zero.
    estimate = np.clip(pipe.predict(frame[features]), 0, None)

    now = datetime.now()
    model_version = f"{period}.{champion.name}.{run_id[:8]}"
    con.executemany(
        "insert into ml.model_runs values (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
        [
            [
                run_id,
                period,
                s.name,
                s.rmse_mean,
                s.rmse_std,
                s.mae_mean,
                s.mae_std,
                len(labelled),
                len(s.rmse_by_split),
                s.name == champion.name,
                now,
            ]
            for s in scores
        ],
    )
    con.executemany(
        "insert into ml.cv_scores values (?, ?, ?, ?, ?)",
        [
            [run_id, s.name, i, r, m]
            for s in scores
            for i, (r, m) in enumerate(zip(s.rmse_by_split, s.mae_by_split, strict=True))
        ],
    )
    oof_by_customer = pd.Series(oof, index=labelled["customer_id"])
    predictions = pd.DataFrame(
        {
            "run_id": run_id,
            "customer_id": frame["customer_id"],
            "estimate": estimate,
            "oof_estimate": frame["customer_id"].map(oof_by_customer).astype("float64"),
            "annual_salary": frame["annual_salary"].astype("float64"),
            "observed_pension": frame["annual_pension"].astype("float64"),
        }
    )
    predictions = predictions.join(
        income_to_publish(
            predictions["annual_salary"],
            predictions["observed_pension"],
            predictions["estimate"],
            settings.bands.edges,
        )
    )
    con.register("prediction_rows", predictions)
    con.execute("insert into ml.predictions by name select * from prediction_rows")
    con.unregister("prediction_rows")

    model_path = _save_model(
        pipe,
        settings.models_dir / period / run_id,
        {
            "model_version": model_version,
            "run_id": run_id,
            "period": period,
            "training_window_months": settings.features.window_months,
            "champion": champion.name,
            "features": features,
            "protected_attributes_excluded": list(t.protected_attributes),
            "n_labelled": len(labelled),
            "cv": {"folds": t.cv_folds, "repeats": t.cv_repeats, "random_state": t.random_state},
            "metrics": {s.name: {"rmse_mean": s.rmse_mean, "mae_mean": s.mae_mean} for s in scores},
            "band_metrics_out_of_fold": bands,
            **code_version(),
            "created_at": now.isoformat(timespec="seconds"),
        },
    )
    summary.candidates = [{k: v for k, v in asdict(s).items() if not k.endswith("_by_split")} for s in scores]
    summary.champion = champion.name
    summary.model_version = model_version
    summary.model_path = str(model_path)
    summary.baseline_rmse = baseline.rmse_mean
    summary.champion_rmse = champion.rmse_mean
    summary.champion_mae = champion.mae_mean
    summary.skill_over_baseline = 1 - champion.rmse_mean / baseline.rmse_mean if baseline.rmse_mean else 0.0
    summary.band_accuracy = bands["band_accuracy"]
    summary.within_one_band = bands["within_one_band"]
    return summary


# Types skops does not trust by default that our candidate pipelines contain: OneHotEncoder keeps its
# output dtype (numpy.dtype); a decision tree keeps its tree structure. Never pass get_untrusted_types().
TRUSTED_TYPES = ["numpy.dtype", "sklearn.tree._tree.Tree"]


def load_model(path: Path) -> Pipeline:
    """Load a saved champion with an explicit allow-list of types."""
    import skops.io as sio

    return sio.load(path, trusted=TRUSTED_TYPES)


def _save_model(pipe: Pipeline, folder: Path, card: dict) -> Path:
    """skops file (not pickle) beside a JSON model card."""
    import skops.io as sio

    folder.mkdir(parents=True, exist_ok=True)
    path = folder / "model.skops"
    sio.dump(pipe, path)
    (folder / "model_card.json").write_text(json.dumps(card, indent=2, default=str) + "\n")
    return path


@task(name="train-candidates", cache_policy=NO_CACHE)
def train_task(ctx: RunContext) -> TrainSummary:
    """Fit and compare the candidates (never retried: training is deterministic)."""
    with open_warehouse(ctx.warehouse) as con:
        return train_and_predict(con, ctx)
