"""The accuracy gate: is the champion good enough to band the customers it estimates?"""

from __future__ import annotations

from prefect import task
from prefect.cache_policies import NO_CACHE

from ledgerband.tasks.context import RunContext
from ledgerband.tasks.gates import ACCURACY, Decision, enforce, pct
from ledgerband.tasks.settings import Settings
from ledgerband.tasks.train import TrainSummary
from ledgerband.tasks.warehouse import open_warehouse

FIGURES = (
    "n_labelled",
    "champion",
    "baseline_rmse",
    "champion_rmse",
    "champion_mae",
    "skill_over_baseline",
    "band_accuracy",
    "within_one_band",
)


def accuracy_gate(train: TrainSummary, settings: Settings) -> Decision:
    """The champion must beat predicting the mean and place enough customers in the right band."""
    a = settings.accuracy
    thresholds = a.model_dump()
    figures = {k: getattr(train, k) for k in FIGURES}
    problems = []
    if train.n_labelled < a.min_labelled_customers:
        problems.append(
            f"labelled customers {train.n_labelled} < accuracy.min_labelled_customers {a.min_labelled_customers}"
        )
    if train.champion is None:
        problems.append(train.note or "no model was trained")
    else:
        checks = (
            (
                "skill_over_baseline",
                "min_skill_over_baseline",
                "RMSE skill over the predict-the-mean baseline",
            ),
            ("band_accuracy", "min_band_accuracy", "out-of-fold band accuracy"),
            ("within_one_band", "min_within_one_band", "out-of-fold within-one-band rate"),
        )
        for figure, threshold, words in checks:
            value, limit = getattr(train, figure), getattr(a, threshold)
            if not value >= limit:  # `not >=` also catches NaN
                problems.append(f"{words} {pct(value)} < accuracy.{threshold} {pct(limit)}")
    if problems:
        return Decision(ACCURACY, "accuracy", False, "; ".join(problems), figures, thresholds)
    return Decision(
        ACCURACY,
        "accuracy",
        True,
        f"{train.champion} RMSE {train.champion_rmse:,.0f} vs baseline {train.baseline_rmse:,.0f} "
        f"(skill {pct(train.skill_over_baseline)}); band accuracy {pct(train.band_accuracy)}, "
        f"within one band {pct(train.within_one_band)}",
        figures,
        thresholds,
    )


@task(name="accuracy-gate", cache_policy=NO_CACHE)
def accuracy_gate_task(ctx: RunContext, train: TrainSummary) -> Decision:
    """Decide whether the champion's estimates may be published (never retried)."""
    with open_warehouse(ctx.warehouse) as con:
        return enforce(con, ctx, accuracy_gate(train, ctx.settings))
