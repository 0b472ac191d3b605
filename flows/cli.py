"""`ledgerband` command line: demo, run, status.

The process environment (Prefect home, offline and quiet switches) is set here, before anything imports
Prefect: importing the package itself changes nothing.
"""

from __future__ import annotations

import json
import logging
import os
from enum import StrEnum
from pathlib import Path
from typing import Annotated

import typer
from rich.console import Console
from rich.table import Table

from ledgerband.tasks.core.errors import LedgerbandError
from ledgerband.tasks.core.runtime import configure_process_env


class DemoFormat(StrEnum):
    csv = "csv"
    parquet = "parquet"


class DefectMode(StrEnum):
    quarantine = "quarantine"
    stop = "stop"


app = typer.Typer(
    add_completion=False,
    no_args_is_help=True,
    help="Monthly ledger extracts → DuckDB → quality gate → salary labels → income bands.",
)
out = Console(soft_wrap=True)
err = Console(stderr=True, soft_wrap=True)


def _version() -> str:
    from importlib.metadata import version

    return version("ledgerband")


def _show_version(value: bool) -> None:
    if value:
        out.print(f"ledgerband {_version()}", highlight=False)
        raise typer.Exit()


@app.callback()
def _entry(
    version: Annotated[
        bool,
        typer.Option("--version", callback=_show_version, is_eager=True, help="Print the version and exit."),
    ] = False,
) -> None:
    """Monthly ledger extracts → DuckDB → quality gate → salary labels → income bands."""
    configure_process_env()


def _fail(exc: Exception) -> None:
    code = getattr(exc, "exit_code", 1)
    err.print(f"[bold red]ledgerband: {exc}[/]", soft_wrap=True)
    raise typer.Exit(code)


class _ExpectedFailureFilter(logging.Filter):
    """Keep Prefect's console quiet about failures the CLI explains itself (bad input, a stopped gate).

    Only the console is filtered: the records still reach the Prefect API, and any other exception is
    logged with its traceback as usual.
    """

    def filter(self, record: logging.LogRecord) -> bool:
        exc = record.exc_info[1] if record.exc_info else None
        if isinstance(exc, LedgerbandError):
            return False
        message = record.getMessage()
        return not any(f"{name}(" in message or f"{name}:" in message for name in _expected_error_names())


def _expected_error_names() -> set[str]:
    names, todo = set(), [LedgerbandError]
    while todo:
        cls = todo.pop()
        names.add(cls.__name__)
        todo.extend(cls.__subclasses__())
    return names


def _quiet_expected_failures() -> None:
    from prefect.logging.handlers import PrefectConsoleHandler

    for name in ("", "prefect", "prefect.flow_runs", "prefect.task_runs"):
        for handler in logging.getLogger(name).handlers:
            if isinstance(handler, PrefectConsoleHandler):
                handler.addFilter(_ExpectedFailureFilter())


def _settings():
    from pydantic import ValidationError

    from ledgerband.tasks.core.settings import get_settings

    try:
        return get_settings()
    except (ValidationError, ValueError) as exc:
        err.print(f"[bold red]ledgerband: configuration error[/]\n{exc}")
        raise typer.Exit(2) from None


def _print_result(result) -> None:
    s = _settings()
    table = Table(title=f"Model comparison, period {result.period} (repeated k-fold CV)")
    for col in ("candidate", "MAE mean", "MAE sd", "RMSE mean", "band accuracy"):
        table.add_column(col, justify="right" if col != "candidate" else "left")
    for c in sorted(result.train.candidates, key=lambda c: c["mae_mean"]):
        mark = " (champion)" if c["name"] == result.train.champion else ""
        table.add_row(
            c["name"] + mark,
            f"{c['mae_mean']:,.0f}",
            f"{c['mae_std']:,.0f}",
            f"{c['rmse_mean']:,.0f}",
            f"{c['band_accuracy_mean']:.1%}",
        )
    out.print(table)
    out.print(f"[green]Accuracy gate passed:[/] {result.accuracy.reason}")
    out.print(f"Published tables (readers open this file): [bold]{result.published_path}[/]")
    if s.readers.parquet:
        out.print(f"Parquet by period (for BI tools): [bold]{s.parquet_dir}[/]")
    if not result.is_current:
        out.print(
            f"[yellow]{result.period} was published as a historical snapshot:[/] a later month's snapshot stays "
            "current, so readers' income_bands did not move back in time."
        )
    out.print(f"Working warehouse: {s.warehouse_path}  (published.income_bands, published.band_summary)")
    out.print(f"Run report: [bold]{result.report}[/]")


def _period(text: str):
    """A YYYY-MM period from the command line, or exit 2 with the reason."""
    from ledgerband.tasks.core.period import Period

    try:
        return Period.parse(text)
    except LedgerbandError as exc:
        _fail(exc)


def _quiet(fn, *args, **kwargs):
    """Call a flow with expected failures kept off the console (the caller reports them)."""
    _quiet_expected_failures()
    return fn(*args, **kwargs)


def _run_guarded(fn, *args, **kwargs):
    _quiet_expected_failures()
    try:
        return fn(*args, **kwargs)
    except LedgerbandError as exc:
        _fail(exc)
    raise AssertionError("unreachable")


@app.command()
def demo(
    customers: Annotated[
        int | None, typer.Option(min=50, help="Customers to generate (default from settings: 2000).")
    ] = None,
    months: Annotated[
        int | None, typer.Option(min=1, max=24, help="Months of extracts ending at --end-period.")
    ] = None,
    end_period: Annotated[str | None, typer.Option(help="Last month, YYYY-MM.")] = None,
    file_format: Annotated[
        DemoFormat | None, typer.Option("--format", case_sensitive=False, help="File format of the extracts.")
    ] = None,
    inject_defects: Annotated[
        DefectMode | None,
        typer.Option(
            "--inject-defects",
            case_sensitive=False,
            help="Damage the last extract: 'quarantine' (a few bad records, the run publishes and the report "
            "lists them) or 'stop' (too many, the quality gate stops the run).",
        ),
    ] = None,
) -> None:
    """Generate demo extracts for a fictional institution and run the monthly flow on them."""
    s = _settings()
    from ledgerband.flows.demo import demo_run

    if end_period is not None:
        _period(end_period)

    out.print(f"Generating demo extracts in {s.demo_landing_dir} and running the monthly flow …")
    result = _run_guarded(
        demo_run,
        customers=customers,
        months=months,
        end_period=end_period,
        file_format=file_format.value if file_format else None,
        inject_defects=inject_defects.value if inject_defects else None,
    )
    files, run_result, t = result
    out.print(
        f"Demo extracts: {len(files.periods)} month(s) {files.periods[0]}..{files.periods[-1]}, "
        f"{files.rows:,} ledger records; true incomes (never read by the pipeline): {files.answers}"
    )
    _print_result(run_result)
    out.print(
        f"Demo truth check (only a synthetic bank can do this): for the {t['customers_estimated']} customers "
        f"the model estimated, RMSE {t['rmse']:,.0f}, MAE {t['mae']:,.0f}, mean error {t['mean_error']:+,.0f}, "
        f"band accuracy {t['band_accuracy']:.1%}, within one band {t['within_one_band']:.1%}; their "
        f"intervals hold the true income for {t['interval_coverage']:.1%}. Error floor (RMSE of the part of income "
        f"no behaviour shows): {t['error_floor_rmse']:,.0f} for them, {t['labelled_error_floor_rmse']:,.0f} for "
        "the labelled customers.",
        soft_wrap=True,
    )
    _print_label_agreement(t["labels"])


def _print_label_agreement(labels: dict) -> None:
    """Salary labels against the demo's true net pay: right (within 2%), wrong, none; by pay calendar."""
    s, e = labels["salaried"], labels["label_expected"]
    out.print(
        f"Salary labels vs true net pay (within 2%): of {s['customers']} salaried customers {s['right']:.1%} "
        f"right, {s['wrong']:.1%} wrong, {s['none']:.1%} unlabelled; of the {e['customers']} whose pay shows "
        f"its calendar {e['right']:.1%} right, {e['wrong']:.1%} wrong; {labels['without_current_pay_labelled']:.1%} "
        f"of the {labels['without_current_pay']} customers without current pay labelled.",
        soft_wrap=True,
        highlight=False,
    )
    table = Table(title="Salary labels by pay calendar and by life event (salaried customers)")
    for col in ("group", "customers", "right", "wrong", "unlabelled"):
        table.add_column(col, justify="left" if col == "group" else "right")
    for title, groups in (("calendar", labels["by_pattern"]), ("event", labels["by_life_event"])):
        for name, g in sorted(groups.items(), key=lambda kv: -kv[1]["customers"]):
            table.add_row(
                f"{title}: {name}",
                str(g["customers"]),
                f"{g['right']:.1%}",
                f"{g['wrong']:.1%}",
                f"{g['none']:.1%}",
            )
    out.print(table)


@app.command()
def run(
    period: Annotated[str, typer.Option(help="Month to run, YYYY-MM.")],
    landing: Annotated[
        Path | None, typer.Option(help="Landing folder: <landing>/<period>/ and customers.csv.")
    ] = None,
) -> None:
    """Run the monthly flow for one period on the files in the landing folder."""
    s = _settings()
    _period(period)
    landing = landing or s.landing
    if not landing.is_dir():
        _fail(LedgerbandError(f"landing folder {landing} does not exist"))
    from ledgerband.flows.monthly import monthly_run

    _print_result(_run_guarded(monthly_run, period, landing))


@app.command()
def backfill(
    from_: Annotated[str, typer.Option("--from", help="First month, YYYY-MM.")],
    to: Annotated[str, typer.Option("--to", help="Last month, YYYY-MM (inclusive).")],
    force: Annotated[bool, typer.Option(help="Run months that are already published again.")] = False,
    landing: Annotated[Path | None, typer.Option(help="Landing folder (default: settings).")] = None,
) -> None:
    """Run months in order; skip published ones unless --force; stop at the first that fails.

    A month older than the current snapshot is published as a historical snapshot: readers' current
    tables never move back in time.
    """
    s = _settings()
    first, last = _period(from_), _period(to)
    if last < first:
        _fail(LedgerbandError(f"--from {first} is after --to {last}"))
    landing = landing or s.landing
    if not landing.is_dir():
        _fail(LedgerbandError(f"landing folder {landing} does not exist"))
    published = _published_periods(s)
    from ledgerband.flows.monthly import monthly_run

    period = first
    while period <= last:
        if str(period) in published and not force:
            out.print(f"{period}: already published, skipped (--force runs it again)")
        else:
            try:
                result = _quiet(monthly_run, str(period), landing)
            except LedgerbandError as exc:
                out.print(f"[red]Backfill stopped at {period}[/]; later months were not run.")
                _fail(exc)
            note = "" if result.is_current else " (historical snapshot; the current one stays)"
            out.print(f"{period}: {result.status}{note} — run {result.run_id}", highlight=False)
        period = period.shift(1)


@app.command()
def restate(
    period: Annotated[str, typer.Option(help="The accepted month to restate, YYYY-MM.")],
    reason: Annotated[str, typer.Option(help="Why (kept in ops.restatements and ops.loads).")],
    landing: Annotated[Path | None, typer.Option(help="Landing folder with the corrected file.")] = None,
) -> None:
    """Replace an accepted month's extract by a corrected one in the landing folder, and run the month."""
    s = _settings()
    from ledgerband.tasks.core.warehouse import open_warehouse
    from ledgerband.tasks.ops import restate as restatement

    p = _period(period)
    landing = landing or s.landing

    def begin() -> str:
        with open_warehouse(s.warehouse_path) as con:  # a held warehouse is a clear error too
            return restatement.begin(con, p, landing, reason, s.quality.expected_sources)

    request = _run_guarded(begin)
    from ledgerband.flows.monthly import monthly_run

    try:
        result = _quiet(monthly_run, str(p), landing)
    except BaseException as exc:
        with open_warehouse(s.warehouse_path) as con:
            restatement.finish(con, request, p, None, f"{type(exc).__name__}: {exc}")
        out.print(f"[red]Restatement of {p} failed[/]: the previously accepted extract stays in force.")
        if isinstance(exc, LedgerbandError):
            _fail(exc)
        raise
    with open_warehouse(s.warehouse_path) as con:
        restatement.finish(con, request, p, result.run_id, None)
    out.print(
        f"{p} restated from the corrected extract: {result.status} — run {result.run_id}", highlight=False
    )


def _published_periods(s) -> set[str]:
    from ledgerband.tasks.core.warehouse import connect

    if not s.warehouse_path.exists():
        return set()
    con = connect(s.warehouse_path, read_only=True)
    try:
        return {p for (p,) in con.execute("select distinct period from published.snapshots").fetchall()}
    except Exception:  # no snapshot table yet: nothing published
        return set()
    finally:
        con.close()


class ExportFormat(StrEnum):
    parquet = "parquet"
    csv = "csv"


@app.command()
def export(
    period: Annotated[str, typer.Option(help="Published month, YYYY-MM.")],
    to: Annotated[Path, typer.Option(help="Folder to write the files into.")],
    format: Annotated[ExportFormat, typer.Option(help="parquet or csv.")] = ExportFormat.parquet,
) -> None:
    """Write one published month's tables (income bands, band summary, band movers) to a folder."""
    s = _settings()
    from ledgerband.tasks.publish.export import export_period

    _period(period)
    files = _run_guarded(export_period, s.published_path, period, format.value, to)
    for name, path in files.items():
        out.print(f"{name}: {path}", highlight=False)


@app.command()
def contract() -> None:
    """Print the readers' contract (published tables and columns) as the README shows it."""
    s = _settings()
    import duckdb

    from ledgerband.tasks.publish.readers_contract import markdown

    if not s.published_path.exists():
        _fail(LedgerbandError(f"no published tables yet at {s.published_path}; run `ledgerband demo` first"))
    con = duckdb.connect(str(s.published_path), read_only=True)
    try:
        catalog = con.execute("select current_database()").fetchall()[0][0]
        print(markdown(con, catalog))
    finally:
        con.close()


@app.command()
def deploy(
    work_pool: Annotated[
        str | None, typer.Option(help="Process work pool (default: schedule.work_pool).")
    ] = None,
) -> None:
    """Register the monthly schedule on the Prefect server in PREFECT_API_URL (a process worker runs it)."""
    s = _settings()
    if not os.environ.get("PREFECT_API_URL"):
        _fail(
            LedgerbandError(
                "PREFECT_API_URL is not set: deploy registers the schedule on a running Prefect server "
                "(see README, Operating it), or use `ledgerband serve`"
            )
        )
    from ledgerband.flows.deploy import deploy as register

    deployment_id = _run_guarded(register, s, work_pool)
    pool = work_pool or s.schedule.work_pool
    out.print(
        f"Deployment [bold]ledgerband-monthly-run/{s.schedule.deployment_name}[/] ({deployment_id}) on work pool "
        f"[bold]{pool}[/]: cron '{s.schedule.cron}' in {s.schedule.timezone}, one run at a time; each run reads "
        f"the month before its scheduled time. Start a worker: prefect worker start --pool {pool}",
        soft_wrap=True,
    )


@app.command()
def serve() -> None:
    """Run the monthly schedule from this process (no work pool); keep it running as a service."""
    s = _settings()
    from ledgerband.flows.deploy import serve as serve_schedule

    out.print(
        f"Serving the monthly schedule: cron '{s.schedule.cron}' in {s.schedule.timezone}; stop with Ctrl-C "
        "(Prefect pauses the schedule when the process stops).",
        soft_wrap=True,
    )
    serve_schedule(s)


@app.command()
def status(limit: Annotated[int, typer.Option(help="How many recent runs to show.")] = 10) -> None:
    """Recent runs, their stages and gate outcomes (read from the working warehouse)."""
    from ledgerband.tasks.core.queries import run_query
    from ledgerband.tasks.core.warehouse import connect

    s = _settings()
    if not s.warehouse_path.exists():
        _fail(
            LedgerbandError(
                f"no warehouse yet at {s.warehouse_path}; run `ledgerband demo` or `ledgerband run`"
            )
        )
    try:
        con = connect(s.warehouse_path, read_only=True)
    except LedgerbandError as exc:
        _fail(exc)
    rows = run_query(con, "cli", "recent_runs", runs=limit).fetchall()
    has_alerts = con.execute(
        "select count(*) from information_schema.tables where table_schema = 'ops' and table_name = 'alerts'"
    ).fetchall()[0][0]
    undelivered = run_query(con, "cli", "undelivered_alerts", alerts=limit).fetchall() if has_alerts else []
    con.close()
    if undelivered:
        out.print(f"[red]Alerts that did not reach their owners[/] (the local log has them: {s.alerts_log}):")
        for sent, period, audience, channel, attempts, error, run_id in undelivered:
            out.print(
                f"  {str(sent)[:19]} UTC  {period}  to {audience} by {channel}, {attempts} attempt(s): {error}  "
                f"(run {run_id})",
                soft_wrap=True,
                highlight=False,
            )
    out.print(f"Recent runs in {s.warehouse_path}:")
    colour = {"published": "green", "withheld": "yellow", "stopped": "red", "failed": "red", "crashed": "red"}
    from ledgerband.tasks.ops.runlock import lock_is_free
    from ledgerband.tasks.ops.runlog import status_now

    nobody_running = lock_is_free(s.home)
    for run_id, period, started, st, error, stages, gates in rows:
        st, error = status_now(st, error, nobody_running)
        summary = _stage_summary(json.loads(stages or "[]"))
        out.print(
            f"{str(started)[:19]}  {period}  [{colour.get(st, 'white')}]{st:<9}[/]  {summary:<32}  run {run_id}",
            soft_wrap=True,
            highlight=False,
        )
        accuracy = json.loads(gates or "{}").get("accuracy.accuracy", {})
        detail = error or accuracy.get("reason")
        if detail:
            out.print(f"    {detail}", soft_wrap=True, highlight=False)


def _stage_summary(stages: list[dict]) -> str:
    """'7/7 ok', or where the run ended: 'validate stopped (2/7)'."""
    done = sum(1 for x in stages if x["status"] == "ok")
    last = stages[-1] if stages else None
    if last is None:
        return "-"
    if all(x["status"] == "ok" for x in stages):
        return f"{done} ok"
    return f"{last['stage']} {last['status']} after {done} ok"


def main() -> None:  # pragma: no cover - the console script
    app()


if __name__ == "__main__":  # pragma: no cover
    main()
