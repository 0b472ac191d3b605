"""The label gate: are this run's salary labels fit to train on and to publish as observed?

A broken payroll feed (codes dropped, a sender's export changed) shows as fewer labels, more pay that
follows no calendar, fewer salary-coded credits than in the months before, or a median salary that jumps.
Any of these stops the run before a model learns from, or readers see, labels that are wrong.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass

import duckdb
from prefect import task
from prefect.cache_policies import NO_CACHE

from ledgerband.tasks.core.context import RunContext
from ledgerband.tasks.core.queries import run_query
from ledgerband.tasks.core.settings import LabelSettings
from ledgerband.tasks.core.warehouse import open_warehouse
from ledgerband.tasks.gates import Decision, enforce, pct

LABELS = "labels"


@dataclass(frozen=True)
class LabelStats:
    customers: int
    labelled: int
    with_current_pay: int  # labelled, irregular or ambiguous
    irregular: int  # irregular or ambiguous
    median_label: float | None
    coded_credits_this_month: int
    coded_credits_month_before: float | None  # mean of the window's earlier months
    previous_median_label: float | None  # the last run of an earlier month that passed this gate

    @property
    def labelled_share(self) -> float:
        return self.labelled / self.customers if self.customers else 0.0

    @property
    def irregular_share(self) -> float:
        return self.irregular / self.with_current_pay if self.with_current_pay else 0.0

    @property
    def coded_drop(self) -> float | None:
        before = self.coded_credits_month_before
        return None if not before else 1 - self.coded_credits_this_month / before

    @property
    def median_change(self) -> float | None:
        if not self.previous_median_label or self.median_label is None:
            return None
        return self.median_label / self.previous_median_label - 1


def label_stats(con: duckdb.DuckDBPyConnection, ctx: RunContext) -> LabelStats:
    """Read the figures the gate judges from the feature layer (and the last passing decision)."""
    customers, labelled, with_pay, irregular, median = run_query(con, "gates", "label_figures").fetchall()[0]
    by_month = dict(run_query(con, "gates", "coded_salary_credits_by_month").fetchall())
    this_month = int(by_month.get(ctx.period.start, 0))
    earlier = [int(by_month.get(p.start, 0)) for p in ctx.salary_window if p != ctx.period]
    previous = run_query(con, "gates", "last_label_decision", gate=LABELS, period=str(ctx.period)).fetchall()
    previous_median = json.loads(previous[0][0]).get("median_label") if previous else None
    return LabelStats(
        customers=int(customers),
        labelled=int(labelled),
        with_current_pay=int(with_pay),
        irregular=int(irregular),
        median_label=float(median) if median is not None else None,
        coded_credits_this_month=this_month,
        coded_credits_month_before=sum(earlier) / len(earlier) if earlier else None,
        previous_median_label=previous_median,
    )


def label_gate(stats: LabelStats, limits: LabelSettings) -> Decision:
    """Every figure against its threshold; a figure that cannot be measured (no earlier month) is skipped."""
    problems = []
    if not stats.labelled_share >= limits.min_labelled_share:
        problems.append(
            f"labelled share {pct(stats.labelled_share)} ({stats.labelled} of {stats.customers} customers) "
            f"< labels.min_labelled_share {pct(limits.min_labelled_share)}"
        )
    if stats.irregular_share > limits.max_irregular_share:
        problems.append(
            f"irregular or ambiguous pay {pct(stats.irregular_share)} ({stats.irregular} of "
            f"{stats.with_current_pay} customers with current pay) > labels.max_irregular_share "
            f"{pct(limits.max_irregular_share)}"
        )
    drop = stats.coded_drop
    if drop is not None and drop > limits.max_coded_payroll_drop:
        problems.append(
            f"salary-coded credits in the run's month fell {pct(drop)} below the earlier months' mean "
            f"({stats.coded_credits_this_month} vs {stats.coded_credits_month_before:,.1f}) > "
            f"labels.max_coded_payroll_drop {pct(limits.max_coded_payroll_drop)}: is the sender still coding payroll?"
        )
    change = stats.median_change
    if change is not None and not abs(change) <= limits.max_median_label_change:
        problems.append(
            f"median label {stats.median_label:,.0f} moved {pct(change)} from {stats.previous_median_label:,.0f} "
            f"in the last accepted month > labels.max_median_label_change {pct(limits.max_median_label_change)}"
        )
    figures = {
        "customers": stats.customers,
        "labelled": stats.labelled,
        "labelled_share": stats.labelled_share,
        "irregular_share": stats.irregular_share,
        "coded_credits_this_month": stats.coded_credits_this_month,
        "coded_credits_month_before": stats.coded_credits_month_before,
        "coded_drop": drop,
        "median_label": stats.median_label,
        "previous_median_label": stats.previous_median_label,
        "median_change": change,
    }
    thresholds = limits.model_dump()
    if problems:
        return Decision(LABELS, "label_quality", False, "; ".join(problems), figures, thresholds)
    median = (
        "–" if stats.median_label is None or math.isnan(stats.median_label) else f"{stats.median_label:,.0f}"
    )
    return Decision(
        LABELS,
        "label_quality",
        True,
        f"{stats.labelled} of {stats.customers} customers labelled ({pct(stats.labelled_share)}), "
        f"{pct(stats.irregular_share)} of those paid here irregular or ambiguous, median label {median}",
        figures,
        thresholds,
    )


@task(name="label-gate", task_run_name="label-gate-{ctx.period}", cache_policy=NO_CACHE)
def label_gate_task(ctx: RunContext) -> Decision:
    """Judge the run's labels (never retried)."""
    with open_warehouse(ctx.warehouse, ctx.settings.scale) as con:
        return enforce(con, ctx, label_gate(label_stats(con, ctx), ctx.settings.labels))
