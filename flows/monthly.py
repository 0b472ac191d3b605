"""The monthly run: ingest → validate (quality gate) → features → label gate → train → accuracy gate →
drift gate → publish → report."""

from __future__ import annotations

import uuid
from dataclasses import dataclass
from pathlib import Path

from prefect import flow, get_run_logger
from prefect.runtime import flow_run

from ledgerband.tasks.alerts import alert_owners_hook
from ledgerband.tasks.core.cluster import run_cluster
from ledgerband.tasks.core.context import RunContext
from ledgerband.tasks.core.errors import GateStopped
from ledgerband.tasks.core.settings import get_settings
from ledgerband.tasks.core.task_policy import minutes_setting
from ledgerband.tasks.core.warehouse import FEATURES_STAGE
from ledgerband.tasks.gates import Decision
from ledgerband.tasks.gates.accuracy import accuracy_gate_task
from ledgerband.tasks.gates.drift import drift_gate_task
from ledgerband.tasks.gates.labels import label_gate_task
from ledgerband.tasks.gates.quarantine_share import quality_gate_task
from ledgerband.tasks.ingest.extracts import find_extracts_task, ingest_customers_task, ingest_extract_task
from ledgerband.tasks.ingest.loads import LoadResult
from ledgerband.tasks.ingest.verified import ingest_verified_incomes_task
from ledgerband.tasks.layers.build import FeatureBuild, build_features_task
from ledgerband.tasks.modeling.train import TrainSummary, train_task
from ledgerband.tasks.ops.faults import checkpoint
from ledgerband.tasks.ops.runlock import run_lock
from ledgerband.tasks.ops.runlog import FAILED, PUBLISHED, RunLog
from ledgerband.tasks.ops.schedule import period_for_scheduled
from ledgerband.tasks.publish.snapshot import parquet_task, publish_task, refresh_reader_copy_task
from ledgerband.tasks.quality.validate import validate_features_task, validate_load_task
from ledgerband.tasks.quality.verified import validate_verified_task
from ledgerband.tasks.report.run_page import run_artifacts
from ledgerband.tasks.report.run_report import report_task
from ledgerband.tasks.report.validation_page import keep_task as keep_validation_results_task


@dataclass(frozen=True)
class RunResult:
    """What a published run hands back to its caller (the CLI prints it)."""

    run_id: str
    period: str
    status: str
    quality: Decision
    accuracy: Decision
    train: TrainSummary
    report: Path
    published_path: Path
    is_current: bool  # false when a later month's snapshot stays current (a backfill)


def ingest(ctx: RunContext) -> list[LoadResult]:
    """Every window month not yet accepted, one task per extract, then the customer file, then the optional
    verified incomes file (absent: noted, 0 records)."""
    extracts = [ingest_extract_task(ctx, m) for m in find_extracts_task(ctx)]
    return extracts + [ingest_customers_task(ctx), ingest_verified_incomes_task(ctx)]


def validate(ctx: RunContext, loaded: list[LoadResult]) -> Decision:
    """The suite on each new extract, its results kept (JSON and a page), then the quality gate; the verified
    incomes file's own suite (its decision never stops the run)."""
    summaries = [validate_load_task(ctx, load) for load in loaded if load.is_new_extract]
    keep_validation_results_task(ctx, summaries)
    quality = quality_gate_task(ctx, summaries)
    validate_verified_task(ctx)
    return quality


def features(ctx: RunContext) -> FeatureBuild:
    """The SQL layers, then the feature suite (a quality-gate check)."""
    build = build_features_task(ctx)
    validate_features_task(ctx)
    return build


def _run_name() -> str:
    """Prefect's name for a run: its month (a scheduled run's month comes from its scheduled time)."""
    period = flow_run.parameters.get("period") or period_for_scheduled(
        flow_run.scheduled_start_time, get_settings().schedule.timezone
    )
    return f"monthly-{period}"


@flow(
    name="ledgerband-monthly-run",
    flow_run_name=_run_name,
    on_failure=[alert_owners_hook],
    on_crashed=[alert_owners_hook],
    timeout_seconds=minutes_setting("flow_timeout_minutes", 240),
    log_prints=True,
)
def monthly_run(period: str | None = None, landing_dir: Path | None = None) -> RunResult:
    """Run one month end to end; raises GateStopped (flow FAILED, owners alerted) when a gate stops it.

    Without `period` (a scheduled run), the month is the last complete one before the run's scheduled
    time in `schedule.timezone`. Every month of the window is ingested if it has not been already, so a
    missed month is caught up; files already accepted are skipped by checksum.
    """
    if period is None:
        period = str(period_for_scheduled(flow_run.scheduled_start_time, get_settings().schedule.timezone))
    ctx = RunContext.create(period, landing_dir, run_id=str(flow_run.id or uuid.uuid4()))
    # One run at a time per state folder: a second one is refused before it touches anything.
    with run_lock(ctx.settings.home, str(ctx.period)), run_cluster(ctx.settings.scale):
        return _run(ctx)


def _run(ctx: RunContext) -> RunResult:
    log = RunLog(ctx)
    try:
        loaded = log.run("ingest", ingest, ctx, detail=lambda r: {x.source_file: x.status for x in r})
        checkpoint("after_load")
        quality = log.run("validate", validate, ctx, loaded, detail=lambda d: d.reason)
        log.run(
            FEATURES_STAGE,
            features,
            ctx,
            detail=lambda b: (
                {
                    "staging": b.staged,
                    "buckets": b.buckets,
                    "slowest_bucket_seconds": b.slowest_bucket_seconds,
                }
                | b.row_counts
            ),
        )
        log.run("label_gate", label_gate_task, ctx, detail=lambda d: d.reason)
        train = log.run(
            "train", train_task, ctx, detail=lambda t: {"champion": t.champion, "n_labelled": t.n_labelled}
        )
        checkpoint("after_train")
        accuracy = log.run("accuracy_gate", accuracy_gate_task, ctx, train, detail=lambda d: d.reason)
        log.run("drift_gate", drift_gate_task, ctx, detail=lambda d: d.reason)
        published = log.run("publish", publish_task, ctx, train, detail=lambda p: p.__dict__)
    except GateStopped as stop:
        # Every stop leaves its evidence: the report and the readers' copy show the decision.
        report = _best_effort(log, "report", report_task, ctx)
        stop_with_report = stop.with_report(report)
        _best_effort(log, "reader_copy", refresh_reader_copy_task, ctx)
        _artifacts(ctx, stop.run_status, report)
        log.finish(stop.run_status, str(stop_with_report))
        if stop_with_report is stop:
            raise
        raise stop_with_report from None
    except BaseException as exc:
        log.finish(FAILED, f"{type(exc).__name__}: {exc}")
        raise
    # Published: nothing after this can unpublish the month, so ops.runs says published whatever follows;
    # a report or readers' copy that fails is noted there and still fails the run (owners are alerted).
    try:
        report = log.run("report", report_task, ctx, detail=str)
        published_path = log.run("reader_copy", refresh_reader_copy_task, ctx, detail=str)
        log.run("parquet", parquet_task, ctx, detail=lambda rows: rows)
    except Exception as exc:
        log.finish(PUBLISHED, f"published, but {log.stages[-1]['stage']} failed: {type(exc).__name__}: {exc}")
        raise
    checkpoint("after_swap")
    log.finish(PUBLISHED)
    _artifacts(ctx, PUBLISHED, report)
    return RunResult(
        ctx.run_id,
        str(ctx.period),
        PUBLISHED,
        quality,
        accuracy,
        train,
        report,
        published_path,
        published.is_current,
    )


def _artifacts(ctx: RunContext, status: str, report) -> None:
    try:
        run_artifacts(ctx, status, report)
    except Exception as exc:  # the run's page decoration never fails a run
        get_run_logger().warning("could not create the run's Prefect artifacts: %s", exc)


def _best_effort(log: RunLog, stage: str, task_fn, *args):
    """A follow-up stage on the way out of a stopped run; its failure must not hide the stop."""
    try:
        return log.run(stage, task_fn, *args, detail=str)
    except Exception as exc:  # reported, then the original stop is raised
        get_run_logger().warning("%s failed after the run stopped: %s", task_fn.name, exc)
        return None
