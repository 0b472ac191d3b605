"""The demo: generate synthetic extracts for a fictional institution, then run the monthly flow."""

from __future__ import annotations

import json

from prefect import flow, task
from prefect.cache_policies import NO_CACHE

from ledgerband.flows.monthly import RunResult, monthly_run
from ledgerband.tasks.core.context import RunContext
from ledgerband.tasks.core.settings import get_settings
from ledgerband.tasks.core.warehouse import open_warehouse
from ledgerband.tasks.demo.defects import inject
from ledgerband.tasks.demo.generator import DemoFiles, generate
from ledgerband.tasks.demo.truth import label_agreement, truth_check
from ledgerband.tasks.report.run_report import report_task


@task(name="generate-demo-extracts", cache_policy=NO_CACHE)
def generate_task(customers: int, months: int, end_period: str, seed: int, file_format: str) -> DemoFiles:
    s = get_settings()
    return generate(
        s.demo_landing_dir,
        s.demo_answers_path,
        customers=customers,
        months=months,
        end_period=end_period,
        seed=seed,
        file_format=file_format,
        institution=s.demo.institution,
        holidays=s.payroll.holidays,
    )


@task(name="inject-demo-defects", cache_policy=NO_CACHE)
def inject_defects_task(files: DemoFiles, mode: str) -> list[str]:
    """Damage the last extract (demo only) so the quality gate can be seen quarantining or stopping."""
    return inject(files, mode, seed=get_settings().demo.seed)


@task(name="demo-truth-check", cache_policy=NO_CACHE)
def truth_check_task(run_id: str) -> dict:
    """Compare the run with the demo's answers; the figures are kept for the run report (demo only)."""
    s = get_settings()
    with open_warehouse(s.warehouse_path) as con:
        figures = {
            **truth_check(con, s.demo_answers_path, run_id, s.bands.edges),
            "labels": label_agreement(con, s.demo_answers_path),
        }
    path = s.demo_truth_path(run_id)
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(json.dumps(figures, indent=2, default=float) + "\n")
    return figures


@flow(name="ledgerband-demo")
def demo_run(
    customers: int | None = None,
    months: int | None = None,
    end_period: str | None = None,
    seed: int | None = None,
    file_format: str | None = None,
    inject_defects: str | None = None,
) -> tuple[DemoFiles, RunResult, dict]:
    """Generate the demo bank's extracts, run the month, and check the estimates against the truth."""
    d = get_settings().demo
    files = generate_task(
        customers or d.customers,
        months or d.months,
        end_period or d.end_period,
        d.seed if seed is None else seed,
        file_format or d.file_format,
    )
    if inject_defects:
        for line in inject_defects_task(files, inject_defects):
            print(f"injected defect: {line}")
    result = monthly_run(files.periods[-1], files.landing_dir)
    truth = truth_check_task(result.run_id)
    # The report again, now with the truth check beside the cross-validated figures.
    report_task(RunContext.create(result.period, files.landing_dir, run_id=result.run_id))
    return files, result, truth
