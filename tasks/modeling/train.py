"""Train: compare the candidates, bound the champion's skill, put an interval on every estimate.

Labelled customers are those whose salary is paid here (features.customer_salary). `evaluate` is the
pure part (frames in, figures out; see ledgerband.tasks.modeling.candidates, .intervals and
.diagnostics); this module adds what needs the warehouse: reading the frame, writing ml.*, saving the champion and its card.
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
from sklearn.base import clone
from sklearn.pipeline import Pipeline

from ledgerband.tasks.core.cluster import on_cluster
from ledgerband.tasks.core.context import RunContext
from ledgerband.tasks.core.errors import ModelFileRefused
from ledgerband.tasks.core.queries import query_relation
from ledgerband.tasks.core.settings import Settings
from ledgerband.tasks.core.warehouse import open_warehouse
from ledgerband.tasks.ingest.extract_contract import sha256_file
from ledgerband.tasks.modeling.amounts import published_figures
from ledgerband.tasks.modeling.bands import assign_band_index
from ledgerband.tasks.modeling.candidates import (
    BASELINES,
    Comparison,
    Skill,
    bounded_tree_rows,
    compare,
    comparison_sample,
    final_model,
    make_candidates,
    skill,
)
from ledgerband.tasks.modeling.diagnostics import (
    LearningCurve,
    group_errors,
    learning_curve_of,
    population_shift,
)
from ledgerband.tasks.modeling.intervals import (
    Intervals,
    covered,
    fit_conformal,
    held_out_intervals,
    predict_intervals,
)


def model_frame(con: duckdb.DuckDBPyConnection) -> pd.DataFrame:
    """Every customer's features with the observed annual salary (null when not paid here)."""
    return query_relation(con, "modeling", "model_frame").df()


@dataclass
class Evaluation:
    """Everything measured on the labelled customers, before anything is written."""

    comparison: Comparison
    skill: Skill
    n_labelled: int
    sample: np.ndarray = field(repr=False)  # positions (in the labelled rows) the comparison ran on
    held_out: Intervals = field(repr=False)  # repeat-0 held-out estimate and interval, per sampled customer
    coverage: float
    coverage_by_band: pd.DataFrame
    learning: LearningCurve | None

    @property
    def n_compared(self) -> int:
        return len(self.sample)


def evaluate(
    X: pd.DataFrame,
    y: np.ndarray,
    settings: Settings,
    *,
    candidates: dict | None = None,
    with_learning_curve: bool = True,
) -> Evaluation:
    """Compare the candidates on shared splits, bound the champion's skill, measure interval coverage."""
    t, a, edges = settings.train, settings.accuracy, settings.bands.edges
    y = np.asarray(y, dtype=float)
    sample = comparison_sample(y, edges, t.max_cv_customers, t.random_state)
    Xs, ys = X.iloc[sample], y[sample]
    candidates = candidates if candidates is not None else make_candidates(settings)
    # With scale.runner "dask" the CV splits run on the run's Dask cluster (ledgerband.tasks.core.cluster).
    mapper = on_cluster if settings.scale.runner == "dask" else None
    comparison = compare(Xs, ys, settings, candidates, mapper=mapper)
    sk = skill(comparison, a.confidence)
    pipe = candidates[comparison.champion]
    first_repeat = comparison.splits[: comparison.folds]
    held = held_out_intervals(pipe, Xs, ys, settings, first_repeat)
    hit = covered(ys, held)
    by_band = (
        pd.DataFrame(
            {"band_index": assign_band_index(ys, edges), "covered": hit, "width": held.high - held.low}
        )
        .groupby("band_index")
        .agg(customers=("covered", "size"), coverage=("covered", "mean"), mean_width=("width", "mean"))
        .reset_index()
    )
    learning = None
    if with_learning_curve:
        target = a.min_mae_skill + max(sk.mae_skill.mean - sk.mae_skill.lower, 0.0)
        base_mae = comparison.results[sk.mae_baseline].mean("mae")
        learning = learning_curve_of(pipe, Xs, ys, first_repeat, base_mae, target, len(y), t.n_jobs)
    return Evaluation(comparison, sk, len(y), sample, held, float(np.mean(hit)), by_band, learning)


@dataclass
class TrainSummary:
    """The figures the accuracy gate, the report and the CLI read (all from one evaluation)."""

    run_id: str
    period: str
    n_customers: int
    n_labelled: int
    candidates: list[dict]
    n_compared: int | None = None
    champion: str | None = None
    model_version: str | None = None
    model_path: str | None = None
    champion_mae: float | None = None
    champion_rmse: float | None = None
    mae_baseline: str | None = None
    baseline_mae: float | None = None
    mae_skill: float | None = None
    mae_skill_lower: float | None = None
    band_baseline: str | None = None
    baseline_band_accuracy: float | None = None
    band_accuracy: float | None = None
    band_accuracy_lower: float | None = None
    band_skill: float | None = None
    band_skill_lower: float | None = None
    within_one_band: float | None = None
    interval_level: float | None = None
    coverage: float | None = None
    worst_band_coverage: float | None = None
    largest_group_gap: float | None = None
    largest_gap_attribute: str | None = None
    worst_group_coverage: float | None = None
    shift_auc: float | None = None
    customers_needed: int | None = None
    curve_flattened: bool | None = None
    curve_advice: str | None = None
    forest_tree_rows: int | None = None  # the champion forest's trees were grown on at most this many rows
    note: str | None = None

    def figures(self) -> dict:
        return {k: v for k, v in asdict(self).items() if k not in ("candidates", "run_id", "period")}


def summarise(summary: TrainSummary, ev: Evaluation, settings: Settings) -> TrainSummary:
    """Fill the summary's figures from an evaluation."""
    r, sk = ev.comparison.results, ev.skill
    champ = r[sk.champion]
    summary.candidates = [
        {"name": c.name, "is_baseline": c.name in BASELINES, **c.figures()} for c in r.values()
    ]
    summary.n_compared = ev.n_compared
    summary.champion = sk.champion
    summary.champion_mae = champ.mean("mae")
    summary.champion_rmse = champ.mean("rmse")
    summary.mae_baseline = sk.mae_baseline
    summary.baseline_mae = r[sk.mae_baseline].mean("mae")
    summary.mae_skill, summary.mae_skill_lower = sk.mae_skill.mean, sk.mae_skill.lower
    summary.band_baseline = sk.band_baseline
    summary.baseline_band_accuracy = sk.baseline_band_accuracy
    summary.band_accuracy, summary.band_accuracy_lower = sk.band_accuracy.mean, sk.band_accuracy.lower
    summary.band_skill, summary.band_skill_lower = sk.band_skill.mean, sk.band_skill.lower
    summary.within_one_band = sk.within_one_band
    summary.interval_level = settings.intervals.level
    summary.coverage = ev.coverage
    measured = ev.coverage_by_band[ev.coverage_by_band["customers"] >= settings.accuracy.min_group_customers]
    summary.worst_band_coverage = float(measured["coverage"].min()) if len(measured) else None
    if ev.learning is not None:
        summary.customers_needed = ev.learning.customers_needed
        summary.curve_flattened = ev.learning.flattened
        summary.curve_advice = ev.learning.advice
    return summary


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


def train_and_predict(con: duckdb.DuckDBPyConnection, ctx: RunContext) -> TrainSummary:
    """Evaluate, refit the champion with its conformal intervals, store every figure in ml.*."""
    settings, run_id, period = ctx.settings, ctx.run_id, str(ctx.period)
    t, iv = settings.train, settings.intervals
    frame = model_frame(con)
    features = list(t.numeric_features) + list(t.categorical_features)
    is_labelled = frame["annual_salary"].notna().to_numpy()
    labelled = frame[is_labelled].reset_index(drop=True)
    X, y = labelled[features], labelled["annual_salary"].to_numpy(dtype=float)
    summary = TrainSummary(run_id, period, len(frame), len(labelled), candidates=[])
    for table in ML_TABLES:
        con.execute(f"delete from {table} where run_id = ?", [run_id])
    if len(labelled) < 2 * t.cv_folds:
        summary.note = (
            f"only {len(labelled)} labelled customers: too few to cross-validate with {t.cv_folds} folds"
        )
        return summary

    ev = evaluate(X, y, settings)
    summarise(summary, ev, settings)
    candidates = make_candidates(settings)
    champion = ev.comparison.champion
    # The customers the model is for: neither salary nor pension observed.
    is_estimated = (frame["annual_salary"].isna() & frame["annual_pension"].isna()).to_numpy()

    sampled = labelled.iloc[ev.sample].reset_index(drop=True)
    groups, gaps = group_errors(
        sampled, y[ev.sample], ev.held_out.estimate, ev.held_out.low, ev.held_out.high, settings
    )
    summary.largest_group_gap = gaps["largest_band_accuracy_gap"]
    summary.largest_gap_attribute = gaps["largest_gap_attribute"]
    summary.worst_group_coverage = gaps["worst_coverage"]
    shift = population_shift(labelled, frame[is_estimated], settings)
    summary.shift_auc = shift.auc

    # The champion on every labelled customer: the saved model and the conformal intervals.
    conformal = fit_conformal(candidates[champion], X, y, settings)
    pipe = final_model(clone(candidates[champion]).fit(X, y))
    summary.forest_tree_rows = bounded_tree_rows(pipe)
    out = predict_intervals(conformal, frame[features])

    now = datetime.now()
    model_version = f"{period}.{champion}.{run_id[:8]}"
    _write_scores(con, run_id, period, ev, now)
    _write_assessment(con, run_id, groups, ev, shift)
    predictions = _prediction_rows(run_id, frame, is_labelled, ev, out, settings)
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
            "champion": champion,
            "features": features,
            "protected_attributes_excluded": list(t.protected_attributes),
            "n_labelled": len(labelled),
            "n_compared": ev.n_compared,
            "cv": {"folds": t.cv_folds, "repeats": t.cv_repeats, "random_state": t.random_state},
            "candidates": summary.candidates,
            "skill": {
                "confidence": settings.accuracy.confidence,
                "mae_skill": ev.skill.mae_skill.as_dict(),
                "band_skill": ev.skill.band_skill.as_dict(),
                "band_accuracy": ev.skill.band_accuracy.as_dict(),
                "within_one_band": ev.skill.within_one_band,
            },
            "intervals": {
                "level": iv.level,
                "method": iv.method,
                "conformity_score": iv.conformity_score,
                "held_out_coverage": ev.coverage,
                "coverage_by_band": ev.coverage_by_band.to_dict(orient="records"),
            },
            "groups": gaps,
            "population_shift_auc": shift.auc,
            **code_version(),
            "created_at": now.isoformat(timespec="seconds"),
        },
    )
    summary.model_version = model_version
    # The file's checksum beside its figures: a model is only ever loaded when its bytes still match.
    con.execute(
        "update ml.model_runs set model_sha256 = ? where run_id = ? and is_champion",
        [sha256_file(model_path), run_id],
    )
    summary.model_path = str(model_path)
    return summary


ML_TABLES = (
    "ml.model_runs",
    "ml.cv_scores",
    "ml.predictions",
    "ml.group_errors",
    "ml.learning_curve",
    "ml.population_shift",
)


def _write_scores(con: duckdb.DuckDBPyConnection, run_id: str, period: str, ev: Evaluation, now: datetime):
    comparison, champion = ev.comparison, ev.comparison.champion
    runs = pd.DataFrame(
        [
            {
                "run_id": run_id,
                "period": period,
                "candidate": c.name,
                **c.figures(),
                "n_labelled": ev.n_labelled,
                "n_compared": ev.n_compared,
                "n_folds": len(c.rmse),
                "is_baseline": c.name in BASELINES,
                "is_champion": c.name == champion,
                "created_at": now,
            }
            for c in comparison.results.values()
        ]
    )
    scores = pd.DataFrame(
        [
            {
                "run_id": run_id,
                "candidate": c.name,
                "split_index": i,
                "repeat_index": i // comparison.folds,
                "fold_index": i % comparison.folds,
                "rmse": c.rmse[i],
                "mae": c.mae[i],
                "band_accuracy": c.band_accuracy[i],
                "within_one_band": c.within_one_band[i],
            }
            for c in comparison.results.values()
            for i in range(len(c.rmse))
        ]
    )
    for table, rows in (("ml.model_runs", runs), ("ml.cv_scores", scores)):
        con.register("score_rows", rows)
        con.execute(f"insert into {table} by name select * from score_rows")
        con.unregister("score_rows")


def _write_assessment(con, run_id: str, groups: pd.DataFrame, ev: Evaluation, shift) -> None:
    bands = ev.coverage_by_band.assign(
        attribute="observed_band",
        group_name=lambda d: "B" + (d["band_index"] + 1).astype(str),
        in_gap=False,
    ).drop(columns=["band_index", "mean_width"])
    tables = {
        "ml.group_errors": pd.concat([groups, bands], ignore_index=True),
        "ml.population_shift": shift.table,
    }
    if ev.learning is not None:
        tables["ml.learning_curve"] = ev.learning.table
    for table, rows in tables.items():
        con.register("assessment_rows", rows.assign(run_id=run_id))
        con.execute(f"insert into {table} by name select * from assessment_rows")
        con.unregister("assessment_rows")


def _prediction_rows(
    run_id: str,
    frame: pd.DataFrame,
    is_labelled: np.ndarray,
    ev: Evaluation,
    out: Intervals,
    settings: Settings,
) -> pd.DataFrame:
    """One row per customer: estimate, held-out figures for the labelled, and what readers get
    (amounts.published_figures)."""
    n = len(frame)
    labelled_positions = np.flatnonzero(is_labelled)
    oof, oof_low, oof_high = (np.full(n, np.nan) for _ in range(3))
    sampled = labelled_positions[ev.sample]
    oof[sampled], oof_low[sampled], oof_high[sampled] = (
        ev.held_out.estimate,
        ev.held_out.low,
        ev.held_out.high,
    )
    rows = pd.DataFrame(
        {
            "run_id": run_id,
            "customer_id": frame["customer_id"],
            "estimate": out.estimate,
            "oof_estimate": oof,
            "oof_low": oof_low,
            "oof_high": oof_high,
            "annual_salary": frame["annual_salary"].astype("float64"),
            "observed_pension": frame["annual_pension"].astype("float64"),
        }
    )
    return rows.join(
        published_figures(
            rows["annual_salary"],
            rows["observed_pension"],
            rows["estimate"],
            out.low,
            out.high,
            settings.bands.edges,
            estimate_unit=settings.intervals.round_to,
        )
    )


# Types skops does not trust by default that our saved champions contain: OneHotEncoder keeps its output
# dtype (numpy.dtype); trees and forests keep tree structures; histogram boosting its tree predictors;
# our forest (candidates.SteadyForest) is scikit-learn's with a one-thread predict.
# A test saves every candidate and checks this list covers it. Never pass get_untrusted_types().
TRUSTED_TYPES = [
    "numpy.dtype",
    "sklearn.tree._tree.Tree",
    "sklearn.ensemble._hist_gradient_boosting.predictor.TreePredictor",
    "ledgerband.tasks.modeling.candidates.SteadyForest",
]

# Where a class our saved models name lived before tasks/ was regrouped (2026-12-05). A champion saved
# before then names `ledgerband.tasks.models.SteadyForest`; skops imports the module a file names, so
# loading maps the old module to the new one for the load alone (no module of the old name ships).
# The class itself is unchanged. tests/unit/test_saved_models.py loads a file saved by the old code.
LEGACY_MODULES = {"ledgerband.tasks.models": "ledgerband.tasks.modeling.candidates"}
_LEGACY_TRUSTED = [f"{old}.SteadyForest" for old in LEGACY_MODULES]


def load_model(path: Path, sha256: str | None) -> Pipeline:
    """Load a champion this pipeline saved: its bytes must hash to the SHA-256 kept in ml.model_runs
    when it was written (a file replaced or edited since is refused, never unpacked), and its types must
    be on an explicit allow-list."""
    import skops.io as sio

    if not sha256:
        raise ModelFileRefused(f"{path}: no checksum recorded for this model file; it is not loaded")
    got = sha256_file(path)
    if got != sha256:
        raise ModelFileRefused(
            f"{path}: SHA-256 {got[:12]}… differs from {sha256[:12]}… recorded in ml.model_runs when it "
            "was written; the file was changed or replaced and is not loaded"
        )
    import importlib
    import sys

    added = [old for old in LEGACY_MODULES if old not in sys.modules]
    for old in added:
        sys.modules[old] = importlib.import_module(LEGACY_MODULES[old])
    try:
        return sio.load(path, trusted=TRUSTED_TYPES + _LEGACY_TRUSTED)
    finally:
        for old in added:
            del sys.modules[old]


def load_champion(con: duckdb.DuckDBPyConnection, models_dir: Path, run_id: str) -> tuple[Pipeline, dict]:
    """The champion run `run_id` saved, checked against its recorded checksum, and its model card."""
    rows = con.execute(
        "select period, model_sha256 from ml.model_runs where run_id = ? and is_champion", [run_id]
    ).fetchall()
    if not rows:
        raise ModelFileRefused(f"run {run_id} recorded no champion in ml.model_runs")
    period, sha256 = rows[0]
    folder = models_dir / period / run_id
    model = load_model(folder / "model.skops", sha256)
    return model, json.loads((folder / "model_card.json").read_text())


def _save_model(pipe: Pipeline, folder: Path, card: dict) -> Path:
    """skops file (not pickle) beside a JSON model card."""
    import skops.io as sio

    folder.mkdir(parents=True, exist_ok=True)
    path = folder / "model.skops"
    sio.dump(pipe, path)
    (folder / "model_card.json").write_text(json.dumps(card, indent=2, default=str) + "\n")
    return path


@task(name="train-candidates", task_run_name="train-candidates-{ctx.period}", cache_policy=NO_CACHE)
def train_task(ctx: RunContext) -> TrainSummary:
    """Fit and compare the candidates (never retried: training is deterministic)."""
    with open_warehouse(ctx.warehouse, ctx.settings.scale) as con:
        return train_and_predict(con, ctx)
