"""The monthly run: ingest → validate (quality gate) → features → train → accuracy gate → publish → report."""

from __future__ import annotations

import uuid
from pathlib import Path

from prefect import flow, get_run_logger
from prefect.runtime import flow_run

from tasks.alerts import alert_owners_hook
from tasks.errors import GateStopped
from tasks.features import build_features_task
from tasks.gates import accuracy_gate_task, quality_gate_task, record_stop_task
from tasks.ingest import find_extracts_task, ingest_customers_task, ingest_extract_task
from tasks.publish import publish_task, refresh_reader_copy_task
from tasks.report import report_task
from tasks.runlog import RunLog
from tasks.settings import get_settings
from tasks.train import train_task
from tasks.validate import validate_features_task, validate_load_task
from tasks.warehouse import Period


def _best_effort(task_fn, *args):
    """Run a follow-up task on the way out of a stopped run; its failure must not hide the stop."""
    try:
        return task_fn(*args)
    except Exception as exc:  # noqa: BLE001 - reported, then the original stop is raised
        get_run_logger().warning("%s failed after the run stopped: %s", task_fn.name, exc)
        return None


@flow(
    name="ledgerband-monthly-run",
    flow_run_name="monthly-{period}",
    on_failure=[alert_owners_hook],
    log_prints=True,
)
def monthly_run(period: str, landing_dir: Path | None = None) -> dict:
    """Run one month end to end; raises GateStopped (flow FAILED, owners alerted) when a gate stops it.

    Every month of the feature window is ingested if it has not been already, so a missed month is
    caught up; files already accepted are skipped by checksum.
    """
    settings = get_settings()
    Period.parse(period)
    landing = Path(landing_dir) if landing_dir else settings.landing
    warehouse = settings.warehouse_path
    run_id = str(flow_run.id or uuid.uuid4())
    log = RunLog(warehouse, run_id, period)
    result: dict = {"run_id": run_id, "period": period, "warehouse": str(warehouse)}
    try:
        with log.stage("ingest") as stage:
            window = [str(p) for p in Period.parse(period).window(settings.features.window_months)]
            manifests = find_extracts_task(warehouse, landing, window)
            loads = [ingest_extract_task(warehouse, m, run_id) for m in manifests]
            loads.append(ingest_customers_task(warehouse, landing / "customers.csv", run_id))
            stage["detail"] = {load["source_file"]: load["status"] for load in loads}
        with log.stage("validate") as stage:
            new = [load for load in loads if load["status"] == "loaded" and load["period"] is not None]
            validations = [validate_load_task(warehouse, load["load_id"], settings) for load in new]
            quality = quality_gate_task(warehouse, run_id, period, validations, settings)
            log.gate_figures["quality"] = quality
            stage["detail"] = quality["reason"]
            if not quality["passed"]:
                raise GateStopped("quality", quality["reason"])
        with log.stage("features") as stage:
            stage["detail"] = build_features_task(warehouse, period, settings)
            problems = validate_features_task(warehouse)
            if problems:
                raise GateStopped("quality", "; ".join(problems))
        with log.stage("train") as stage:
            train = train_task(warehouse, run_id, period, settings)
            stage["detail"] = {"champion": train["champion"], "n_labelled": train["n_labelled"]}
        with log.stage("accuracy_gate") as stage:
            accuracy = accuracy_gate_task(warehouse, run_id, period, train, settings)
            log.gate_figures["accuracy"] = accuracy
            stage["detail"] = accuracy["reason"]
        if accuracy["passed"]:
            with log.stage("publish") as stage:
                result["publish"] = stage["detail"] = publish_task(
                    warehouse, run_id, period, train["model_version"], settings
                )
        with log.stage("report"):
            result["report"] = report_task(warehouse, run_id, period, settings)
        if accuracy["passed"]:
            with log.stage("reader_copy") as stage:
                stage["detail"] = refresh_reader_copy_task(warehouse, settings)
        if not accuracy["passed"]:
            raise GateStopped("accuracy", accuracy["reason"]).with_report(result["report"])
    except GateStopped as exc:
        _best_effort(record_stop_task, warehouse, run_id, period, exc.gate, exc.reason)
        stop = exc
        if exc.gate != "accuracy":  # the accuracy path wrote its report already
            stop = exc.with_report(_best_effort(report_task, warehouse, run_id, period, settings))
        _best_effort(refresh_reader_copy_task, warehouse, settings)
        log.finish("withheld" if exc.gate == "accuracy" else "stopped", str(stop))
        if stop is exc:
            raise
        raise stop from None
    except BaseException as exc:
        log.finish("failed", f"{type(exc).__name__}: {exc}")
        raise
    log.finish("published")
    result.update(
        status="published",
        quality=quality,
        accuracy=accuracy,
        champion=train["champion"],
        candidates=train["candidates"],
        published_path=str(settings.published_path),
    )
    return result
