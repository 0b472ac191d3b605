"""Report: one static HTML page per run (no scripts, no network): gates, models, bands, cautions."""

from __future__ import annotations

import json
from datetime import datetime
from pathlib import Path

import duckdb
from jinja2 import Environment, PackageLoader, select_autoescape
from prefect import task
from prefect.cache_policies import NO_CACHE

from ledgerband.tasks.context import RunContext
from ledgerband.tasks.retry import IO_RETRIES
from ledgerband.tasks.warehouse import open_warehouse

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


def _rows(con: duckdb.DuckDBPyConnection, query: str, params: list) -> list[dict]:
    cur = con.execute(query, params)
    names = [d[0] for d in cur.description]
    return [dict(zip(names, r, strict=True)) for r in cur.fetchall()]


def gather(con: duckdb.DuckDBPyConnection, ctx: RunContext) -> dict:
    """Everything the report shows, read back from the warehouse (the report computes nothing new)."""
    settings, run_id, period = ctx.settings, ctx.run_id, str(ctx.period)
    window = ctx.load_window.labels
    run = _rows(con, "select * from ops.runs where run_id = ?", [run_id])
    decisions = _rows(con, "select * from published.decisions where run_id = ? order by decided_at", [run_id])
    for d in decisions:
        d["figures"] = json.loads(d["figures"])
        d["thresholds"] = json.loads(d["thresholds"])
    loads = _rows(
        con,
        "select source_file, period, rows_in_file, rows_loaded, rows_quarantined, status, reason, "
        "case when rows_in_file > 0 then rows_quarantined / rows_in_file end as quarantined_share "
        "from ops.loads where dataset = 'ledger' and period in (select unnest(?::varchar[])) "
        "order by period, loaded_at",
        [window],
    )
    models = _rows(con, "select * from ml.model_runs where run_id = ? order by mae_mean", [run_id])
    groups = _rows(
        con,
        "select * from ml.group_errors where run_id = ? order by attribute, group_name",
        [run_id],
    )
    shift = _rows(con, "select * from ml.population_shift where run_id = ? order by feature", [run_id])
    curve = _rows(con, "select * from ml.learning_curve where run_id = ? order by n_train", [run_id])
    drift = _rows(con, "select * from ml.drift where run_id = ? order by psi desc", [run_id])
    drift_decision = next((d for d in decisions if d["gate"] == "drift"), None)
    accuracy = next((d for d in decisions if d["gate"] == "accuracy" and d["check_name"] == "accuracy"), None)
    bands = _rows(
        con,
        """
        select b.band_index, b.income_band, b.band_label,
               count(h.customer_id) filter (where h.band_source like 'observed%') as observed,
               count(h.customer_id) filter (where h.band_source = 'model_estimate') as estimated,
               count(h.customer_id) as customers
        from ref.income_bands as b
        left join published.income_bands_history as h on h.income_band = b.income_band and h.run_id = ?
        group by all order by b.band_index
        """,
        [run_id],
    )
    by_region = _rows(
        con,
        "select home_region, income_band, sum(customer_count)::bigint as customers "
        "from published.band_summary_history where run_id = ? group by all order by home_region, income_band",
        [run_id],
    )
    regions: dict[str, dict[str, int]] = {}
    for r in by_region:
        regions.setdefault(r["home_region"], {})[r["income_band"]] = r["customers"]
    stopped_at = next((d["gate"] for d in decisions if d["decision"] == "stop"), None)
    published = stopped_at is None and accuracy is not None and accuracy["decision"] == "pass"
    quarantine = _rows(
        con,
        """
        select rule, count(*)::bigint as records, min(q.reason) as example
        from (
            select unnest(failed_rules) as rule, reason, load_id
            from quarantine.ledger_lines
        ) as q
        inner join ops.loads as l on l.load_id = q.load_id
        where l.period in (select unnest(?::varchar[]))
        group by rule
        order by records desc, rule
        """,
        [window],
    )
    labels = []
    if any(d["gate"] == "labels" for d in decisions):  # the run built this month's labels
        labels = _rows(
            con,
            "select label_status, coalesce(label_confidence, '–') as confidence, count(*)::bigint as customers, "
            "sum(bonus_amount)::double as bonus_amount from features.customer_label group by all order by all",
            [],
        )
    truth_file = settings.demo_truth_path(run_id)
    truth = json.loads(truth_file.read_text()) if truth_file.is_file() else None
    return {
        "run_id": run_id,
        "truth": truth,
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


def render(context: dict) -> str:
    env = Environment(
        loader=PackageLoader("ledgerband.tasks", "templates"), autoescape=select_autoescape(["html", "j2"])
    )
    env.filters["num"] = lambda x, d=0: "–" if x is None else f"{x:,.{d}f}"
    env.filters["pct"] = lambda x: "–" if x is None else f"{100 * x:.1f}%"
    return env.get_template("run_report.html.j2").render(**context)


def write_report(con: duckdb.DuckDBPyConnection, ctx: RunContext) -> Path:
    out = ctx.settings.reports_dir / str(ctx.period) / "index.html"
    out.parent.mkdir(parents=True, exist_ok=True)
    tmp = out.with_name("index.html.incoming")
    tmp.write_text(render(gather(con, ctx)), encoding="utf-8")
    tmp.replace(out)
    return out


@task(name="write-report", task_run_name="write-report-{ctx.period}", cache_policy=NO_CACHE, **IO_RETRIES)
def report_task(ctx: RunContext) -> Path:
    with open_warehouse(ctx.warehouse) as con:
        return write_report(con, ctx)
