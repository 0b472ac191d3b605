"""The demo: generate synthetic extracts for a fictional institution, then run the monthly flow."""

from __future__ import annotations

from prefect import flow, task
from prefect.cache_policies import NO_CACHE

from flows.monthly import monthly_run
from tasks.demo_data import generate, truth_check
from tasks.settings import get_settings
from tasks.warehouse import open_warehouse


@task(name="generate-demo-extracts", cache_policy=NO_CACHE)
def generate_task(customers: int, months: int, end_period: str, seed: int, file_format: str) -> dict:
    s = get_settings()
    files = generate(
        s.demo_landing_dir,
        s.demo_answers_path,
        customers=customers,
        months=months,
        end_period=end_period,
        seed=seed,
        file_format=file_format,
        institution=s.demo.institution,
    )
    return {
        "landing_dir": str(files.landing_dir),
        "periods": files.periods,
        "rows": files.rows,
        "answers": str(files.answers),
    }


@flow(name="ledgerband-demo")
def demo_run(
    customers: int | None = None,
    months: int | None = None,
    end_period: str | None = None,
    seed: int | None = None,
    file_format: str | None = None,
) -> dict:
    d = get_settings().demo
    generated = generate_task(
        customers or d.customers,
        months or d.months,
        end_period or d.end_period,
        d.seed if seed is None else seed,
        file_format or d.file_format,
    )
    result = monthly_run(generated["periods"][-1], generated["landing_dir"])
    return {"generated": generated, "truth_check": truth_check_task(result["run_id"]), **result}


@task(name="demo-truth-check", cache_policy=NO_CACHE)
def truth_check_task(run_id: str) -> dict:
    s = get_settings()
    with open_warehouse(s.warehouse_path) as con:
        return truth_check(con, s.demo_answers_path, run_id, s.bands.edges)
