"""The accuracy gate: is the champion good enough, and sure enough, to band the customers it estimates?

Relative, not absolute: the champion must beat the strongest baseline (predicting the mean or the median)
on MAE and on band accuracy, each judged on its lower confidence bound across the repeated CV splits, so
a run near a threshold does not pass by the luck of one split. The intervals must cover about as often
as they say. An optional gap check holds band accuracy across groups close. The decision states every
figure, its bound and threshold, and what would change the answer.
"""

from __future__ import annotations

from prefect import task
from prefect.cache_policies import NO_CACHE

from ledgerband.tasks.core.context import RunContext
from ledgerband.tasks.core.settings import Settings
from ledgerband.tasks.core.warehouse import open_warehouse
from ledgerband.tasks.gates import ACCURACY, Decision, enforce, pct
from ledgerband.tasks.modeling.train import TrainSummary


def accuracy_gate(train: TrainSummary, settings: Settings) -> Decision:
    """Pass only when every condition holds; the reason lists each failure and what would change it."""
    a, level = settings.accuracy, settings.intervals.level
    thresholds = {**a.model_dump(), "interval_level": level}
    figures = train.figures()
    problems: list[str] = []
    if train.n_labelled < a.min_labelled_customers:
        problems.append(
            f"labelled customers {train.n_labelled} < accuracy.min_labelled_customers {a.min_labelled_customers}"
        )
    if train.champion is None:
        problems.append(train.note or "no model was trained")
        return Decision(ACCURACY, "accuracy", False, "; ".join(problems), figures, thresholds)

    bound = f"{100 * a.confidence:.0f}% lower bound"
    checks = (
        (
            train.mae_skill_lower,
            a.min_mae_skill,
            f"MAE skill over {train.mae_baseline} {pct(train.mae_skill)} ({bound} "
            f"{pct(train.mae_skill_lower)}) < accuracy.min_mae_skill {pct(a.min_mae_skill)}",
        ),
        (
            train.band_skill_lower,
            a.min_band_skill,
            f"band-accuracy skill over {train.band_baseline} {pct(train.band_skill)} ({bound} "
            f"{pct(train.band_skill_lower)}; band accuracy {pct(train.band_accuracy)} vs "
            f"{pct(train.baseline_band_accuracy)}) < accuracy.min_band_skill {pct(a.min_band_skill)}",
        ),
    )
    for value, limit, words in checks:
        if not value >= limit:  # `not >=` also catches NaN
            problems.append(words)
    coverage_off = abs(train.coverage - level) if train.coverage is not None else float("nan")
    if not coverage_off <= a.coverage_tolerance:
        problems.append(
            f"held-out interval coverage {pct(train.coverage)} is more than accuracy.coverage_tolerance "
            f"{pct(a.coverage_tolerance)} from the nominal {pct(level)}"
        )
    if a.max_group_gap < 1 and not (train.largest_group_gap or 0.0) <= a.max_group_gap:
        problems.append(
            f"band accuracy differs by {pct(train.largest_group_gap)} between {train.largest_gap_attribute} "
            f"groups > accuracy.max_group_gap {pct(a.max_group_gap)}"
        )
    if problems:
        return Decision(
            ACCURACY, "accuracy", False, "; ".join(problems) + _what_would_help(train), figures, thresholds
        )
    return Decision(
        ACCURACY,
        "accuracy",
        True,
        f"{train.champion}: MAE {train.champion_mae:,.0f} vs {train.mae_baseline} {train.baseline_mae:,.0f} "
        f"(skill {pct(train.mae_skill)}, {bound} {pct(train.mae_skill_lower)}); band accuracy "
        f"{pct(train.band_accuracy)} vs {pct(train.baseline_band_accuracy)} (skill {pct(train.band_skill)}, "
        f"{bound} {pct(train.band_skill_lower)}); {pct(level)} intervals cover {pct(train.coverage)} held out",
        figures,
        thresholds,
    )


def _what_would_help(train: TrainSummary) -> str:
    if train.curve_advice:
        return f". What would change the answer: {train.curve_advice}"
    return ""


def shift_decision(train: TrainSummary, settings: Settings) -> Decision:
    """Population shift is reported, never a stop: a warning when the estimated customers are easy to
    tell from the labelled ones (the accuracy measured on the labelled then says less about them)."""
    limit = settings.accuracy.max_shift_auc
    figures = {"shift_auc": train.shift_auc}
    if train.shift_auc is None:
        return Decision(
            ACCURACY, "population_shift", True, "not measured (too few customers in a group)", figures
        )
    if train.shift_auc > limit:
        return Decision(
            ACCURACY,
            "population_shift",
            True,
            f"warning: a classifier tells estimated from labelled customers apart with AUC {train.shift_auc:.2f} "
            f"> accuracy.max_shift_auc {limit:.2f}; their real error can differ from the measured one",
            figures,
            {"max_shift_auc": limit},
            warning=True,
        )
    return Decision(
        ACCURACY,
        "population_shift",
        True,
        f"estimated and labelled customers are alike enough: AUC {train.shift_auc:.2f} <= {limit:.2f}",
        figures,
        {"max_shift_auc": limit},
    )


@task(name="accuracy-gate", task_run_name="accuracy-gate-{ctx.period}", cache_policy=NO_CACHE)
def accuracy_gate_task(ctx: RunContext, train: TrainSummary) -> Decision:
    """Decide whether the champion's estimates may be published (never retried)."""
    with open_warehouse(ctx.warehouse, ctx.settings.scale) as con:
        if train.champion is not None:
            enforce(con, ctx, shift_decision(train, ctx.settings))
        return enforce(con, ctx, accuracy_gate(train, ctx.settings))
