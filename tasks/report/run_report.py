"""Report: one static HTML page per run (no scripts, no network): gates, models, bands, cautions."""

from __future__ import annotations

import json
from datetime import datetime
from pathlib import Path

import duckdb
from jinja2 import Environment, PackageLoader, select_autoescape
from prefect import task
from prefect.cache_policies import NO_CACHE

from ledgerband.tasks.core.context import RunContext
from ledgerband.tasks.core.queries import run_query
from ledgerband.tasks.core.task_policy import IO_RETRIES
from ledgerband.tasks.core.warehouse import open_warehouse

CAUTIONS = (
    "Internal reporting only. These bands estimate income from account behaviour; they are not verified "
    "income and must never replace verified income in a credit, affordability or pricing decision.",
    "Estimates about individuals can be wrong, and wrong in ways that differ between groups of customers. "
    "Read the accuracy figures before using any band, and do not act on one customer's band alone.",
    "The accuracy figures are measured on customers whose salary is paid here. The customers the model "
    "estimates (self-employed, pensioners, paid elsewhere) differ from them, so their real error can be larger.",
    "Protected attributes (sex, age, birth date) are not model features by default; the settings refuse "
    "them unless explicitly allowed after review.",
    "Transaction data is personal data. Identifiers here are pseudonymous; keep the published tables "
    "inside the bank, on a need-to-know basis, and follow the retention rules that apply.",
    "Local law and the bank's own policies take precedence over anything in this report.",
)


def _rows(cur: duckdb.DuckDBPyConnection) -> list[dict]:
    """An executed statement's rows as dicts keyed by column name."""
    names = [d[0] for d in cur.description]
    return [dict(zip(names, r, strict=True)) for r in cur.fetchall()]


def gather(con: duckdb.DuckDBPyConnection, ctx: RunContext) -> dict:
    """Everything the report shows, read back from the warehouse (the report computes nothing new)."""
    settings, run_id, period = ctx.settings, ctx.run_id, str(ctx.period)
    window = ctx.load_window.labels
    run = _rows(con.execute("select * from ops.runs where run_id = ?", [run_id]))
    decisions = _rows(
        con.execute("select * from published.decisions where run_id = ? order by decided_at", [run_id])
    )
    for d in decisions:
        d["figures"] = json.loads(d["figures"])
        d["thresholds"] = json.loads(d["thresholds"])
    loads = _rows(run_query(con, "report", "window_loads", window=window))
    models = _rows(con.execute("select * from ml.model_runs where run_id = ? order by mae_mean", [run_id]))
    groups = _rows(
        con.execute("select * from ml.group_errors where run_id = ? order by attribute, group_name", [run_id])
    )
    shift = _rows(
        con.execute("select * from ml.population_shift where run_id = ? order by feature", [run_id])
    )
    curve = _rows(con.execute("select * from ml.learning_curve where run_id = ? order by n_train", [run_id]))
    drift = _rows(con.execute("select * from ml.drift where run_id = ? order by psi desc", [run_id]))
    drift_decision = next((d for d in decisions if d["gate"] == "drift"), None)
    accuracy = next((d for d in decisions if d["gate"] == "accuracy" and d["check_name"] == "accuracy"), None)
    bands = _rows(run_query(con, "report", "band_customers", run_id=run_id))
    by_region = _rows(run_query(con, "report", "region_band_customers", run_id=run_id))
    regions: dict[str, dict[str, int]] = {}
    for r in by_region:
        regions.setdefault(r["home_region"], {})[r["income_band"]] = r["customers"]
    stopped_at = next((d["gate"] for d in decisions if d["decision"] == "stop"), None)
    published = stopped_at is None and accuracy is not None and accuracy["decision"] == "pass"
    quarantine = _rows(run_query(con, "report", "rule_quarantine", window=window))
    labels = []
    if any(d["gate"] == "labels" for d in decisions):  # the run built this month's labels
        labels = _rows(run_query(con, "report", "label_counts"))
    from ledgerband.tasks.report.plots import draw_all

    plots = draw_all(con, run_id, settings.bands.currency, settings.bands.edges)
    truth_file = settings.demo_truth_path(run_id)
    truth = json.loads(truth_file.read_text()) if truth_file.is_file() else None
    return {
        "run_id": run_id,
        "truth": truth,
        "plots": plots,
        "labels": labels,
        "period": period,
        "generated_at": datetime.now().isoformat(timespec="seconds"),
        "run": run[0] if run else {},
        "stages": json.loads(run[0]["stages"]) if run and run[0]["stages"] else [],
        "decisions": decisions,
        "published": published,
        "stopped_at": stopped_at,
        "quarantine": quarantine,
        "loads": loads,
        "validation_page": _validation_page(ctx),
        "models": models,
        "groups": groups,
        "shift": shift,
        "shift_auc": accuracy["figures"].get("shift_auc") if accuracy else None,
        "curve": curve,
        "drift": drift,
        "drift_decision": drift_decision,
        "bands": bands,
        "max_band_count": max([b["customers"] for b in bands] or [1]) or 1,
        "regions": regions,
        "band_codes": [b["income_band"] for b in bands],
        "cautions": CAUTIONS,
        "settings": {
            "window_months": settings.features.window_months,
            "folds": settings.train.cv_folds,
            "repeats": settings.train.cv_repeats,
            "interval_level": settings.intervals.level,
            "interval_method": settings.intervals.method,
            "interval_score": settings.intervals.conformity_score,
            "round_to": settings.intervals.round_to,
            "min_group_customers": settings.accuracy.min_group_customers,
            "max_shift_auc": settings.accuracy.max_shift_auc,
            "psi_warn": settings.drift.psi_warn,
            "psi_stop": settings.drift.psi_stop,
            "currency": settings.bands.currency,
            "features": list(settings.train.numeric_features) + list(settings.train.categorical_features),
        },
        "published_path": str(settings.published_path),
    }


def _validation_page(ctx: RunContext) -> str | None:
    """The run's validation results page, relative to the report (they share a folder), if it was written."""
    from ledgerband.tasks.report.validation_page import paths

    _, page = paths(ctx.settings.reports_dir, str(ctx.period), ctx.run_id)
    return page.name if page.is_file() else None


def render(context: dict) -> str:
    env = Environment(
        loader=PackageLoader("ledgerband.tasks.report", "templates"),
        autoescape=select_autoescape(["html", "j2"]),
    )
    env.filters["num"] = lambda x, d=0: "–" if x is None else f"{x:,.{d}f}"
    env.filters["pct"] = lambda x: "–" if x is None else f"{100 * x:.1f}%"
    return env.get_template("run_report.html.j2").render(**context)


def write_report(con: duckdb.DuckDBPyConnection, ctx: RunContext) -> Path:
    """The run's report, kept per run (`<period>/<run_id>.html`); `<period>/index.html` is the latest run
    of the month and `reports/index.html` lists every run. Each file is written beside and renamed in."""
    folder = ctx.settings.reports_dir / str(ctx.period)
    folder.mkdir(parents=True, exist_ok=True)
    page = render(gather(con, ctx))
    run_file = folder / f"{ctx.run_id}.html"
    for target in (run_file, folder / "index.html"):
        _write_atomically(target, page)
    _write_atomically(ctx.settings.reports_dir / "index.html", render_index(con, ctx.settings.reports_dir))
    return folder / "index.html"


def _write_atomically(target: Path, text: str) -> None:
    tmp = target.with_name(target.name + ".incoming")
    tmp.write_text(text, encoding="utf-8")
    tmp.replace(target)


def render_index(con: duckdb.DuckDBPyConnection, reports_dir: Path) -> str:
    """Every run, newest first: period, status, how it ended, champion, and a link to its report."""
    from html import escape

    rows = run_query(con, "report", "run_index").fetchall()
    body = []
    for run_id, period, started, status, error, gates, champion in rows:
        link = f"{period}/{run_id}.html"
        exists = (reports_dir / link).exists()
        name = f'<a href="{escape(link)}">{escape(run_id[:8])}</a>' if exists else escape(run_id[:8])
        body.append(
            f'<tr><td>{escape(str(period))}</td><td>{escape(str(started)[:19])}</td><td class="{escape(status)}">'
            f"{escape(status)}</td><td>{escape(gates or '–')}</td><td>{escape(champion or '–')}</td>"
            f"<td>{name}</td><td>{escape((error or '')[:300])}</td></tr>"
        )
    return (
        '<!doctype html><html lang="en"><head><meta charset="utf-8"><title>ledgerband runs</title>'
        "<style>body{font-family:system-ui,sans-serif;margin:2rem;max-width:80rem}table{border-collapse:collapse}"
        "td,th{border-bottom:1px solid #ddd;padding:.3rem .6rem;text-align:left;vertical-align:top}"
        ".published{color:#1a7f37}.withheld{color:#9a6700}.stopped,.failed{color:#cf222e}</style></head><body>"
        "<h1>ledgerband runs</h1><p>Internal reporting only; never a substitute for verified income.</p>"
        "<table><tr><th>Period</th><th>Started</th><th>Status</th><th>Gates</th><th>Champion</th>"
        "<th>Report</th><th>Why it ended so</th></tr>" + "".join(body) + "</table></body></html>"
    )


@task(name="write-report", task_run_name="write-report-{ctx.period}", cache_policy=NO_CACHE, **IO_RETRIES)
def report_task(ctx: RunContext) -> Path:
    with open_warehouse(ctx.warehouse, ctx.settings.scale) as con:
        return write_report(con, ctx)
