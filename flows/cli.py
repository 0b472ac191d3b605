"""`ledgerband` command line: demo, run, status."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Annotated

import typer
from rich.console import Console
from rich.table import Table

import tasks  # noqa: F401  (process environment first)
from tasks.errors import LedgerbandError

app = typer.Typer(
    add_completion=False,
    no_args_is_help=True,
    help="Monthly ledger extracts → DuckDB → quality gate → salary labels → income bands.",
)
out = Console()
err = Console(stderr=True)


def _fail(exc: Exception) -> None:
    code = getattr(exc, "exit_code", 1)
    err.print(f"[bold red]ledgerband: {exc}[/]")
    raise typer.Exit(code)


def _settings():
    from pydantic import ValidationError

    from tasks.settings import get_settings

    try:
        return get_settings()
    except (ValidationError, ValueError) as exc:
        err.print(f"[bold red]ledgerband: configuration error[/]\n{exc}")
        raise typer.Exit(2) from None


def _print_result(result: dict) -> None:
    s = _settings()
    table = Table(title=f"Model comparison, period {result['period']} (repeated k-fold CV)")
    for col in ("candidate", "RMSE mean", "RMSE sd", "MAE mean"):
        table.add_column(col, justify="right" if col != "candidate" else "left")
    for c in result.get("candidates", []):
        mark = " (champion)" if c["name"] == result.get("champion") else ""
        table.add_row(
            c["name"] + mark, f"{c['rmse_mean']:,.0f}", f"{c['rmse_std']:,.0f}", f"{c['mae_mean']:,.0f}"
        )
    out.print(table)
    out.print(f"[green]Accuracy gate passed:[/] {result['accuracy']['reason']}")
    out.print(f"Published tables (readers open this file): [bold]{result['published_path']}[/]")
    out.print(f"Working warehouse: {s.warehouse_path}  (published.income_bands, published.band_summary)")
    out.print(f"Run report: [bold]{result['report']}[/]")


def _run_guarded(fn, *args, **kwargs) -> dict:
    try:
        return fn(*args, **kwargs)
    except LedgerbandError as exc:
        _fail(exc)
    raise AssertionError("unreachable")


@app.command()
def demo(
    customers: Annotated[
        int | None, typer.Option(help="Customers to generate (default from settings: 2000).")
    ] = None,
    months: Annotated[int | None, typer.Option(help="Months of extracts ending at --end-period.")] = None,
    end_period: Annotated[str | None, typer.Option(help="Last month, YYYY-MM.")] = None,
    file_format: Annotated[str | None, typer.Option("--format", help="csv or parquet.")] = None,
) -> None:
    """Generate demo extracts for a fictional institution and run the monthly flow on them."""
    s = _settings()
    from flows.demo import demo_run

    out.print(f"Generating demo extracts in {s.demo_landing_dir} and running the monthly flow …")
    result = _run_guarded(
        demo_run, customers=customers, months=months, end_period=end_period, file_format=file_format
    )
    g = result["generated"]
    out.print(
        f"Demo extracts: {len(g['periods'])} month(s) {g['periods'][0]}..{g['periods'][-1]}, "
        f"{g['rows']:,} ledger records; true incomes (never read by the pipeline): {g['answers']}"
    )
    _print_result(result)


@app.command()
def run(
    period: Annotated[str, typer.Option(help="Month to run, YYYY-MM.")],
    landing: Annotated[
        Path | None, typer.Option(help="Landing folder: <landing>/<period>/ and customers.csv.")
    ] = None,
) -> None:
    """Run the monthly flow for one period on the files in the landing folder."""
    s = _settings()
    landing = landing or s.landing
    if not landing.is_dir():
        _fail(LedgerbandError(f"landing folder {landing} does not exist"))
    from flows.monthly import monthly_run

    _print_result(_run_guarded(monthly_run, period, landing))


@app.command()
def status(limit: Annotated[int, typer.Option(help="How many recent runs to show.")] = 10) -> None:
    """Recent runs, their stages and gate outcomes (read from the working warehouse)."""
    import duckdb

    from tasks.warehouse import connect

    s = _settings()
    if not s.warehouse_path.exists():
        _fail(
            LedgerbandError(
                f"no warehouse yet at {s.warehouse_path}; run `ledgerband demo` or `ledgerband run`"
            )
        )
    try:
        con = connect(s.warehouse_path, read_only=True)
    except duckdb.IOException:
        _fail(
            LedgerbandError(
                "the warehouse is busy (a run is writing it); published tables stay readable at "
                f"{s.published_path}"
            )
        )
    rows = con.execute(
        "select run_id, period, started_at, finished_at, status, error, stages from ops.runs "
        "order by started_at desc limit ?",
        [limit],
    ).fetchall()
    con.close()
    table = Table(title="Recent runs")
    for col in ("started", "period", "status", "stages", "run id", "why"):
        table.add_column(col)
    for run_id, period, started, _finished, st, error, stages in rows:
        stage_text = " ".join(f"{x['stage']}:{x['status']}" for x in json.loads(stages or "[]"))
        table.add_row(str(started)[:19], period, st, stage_text, run_id[:8], (error or "")[:160])
    out.print(table)


def main() -> None:  # pragma: no cover
    app()


if __name__ == "__main__":  # pragma: no cover
    main()
