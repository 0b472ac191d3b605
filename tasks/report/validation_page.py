"""Validation results kept per run: GX's results as JSON, and a page a person can read offline.

`<reports>/<period>/<run_id>.validation.json` holds, for each extract the run validated, GX's result
for every rule in GX's own JSON form (expectation_config, success, result), merged over the chunks the
suite ran on: counts summed, the first few unexpected records kept (validate.RESULTS_KEPT).
`<run_id>.validation.html` renders the same file; the run report links to it. Both are written before
the quality gate decides, so a run that the gate stops keeps its evidence too.
"""

from __future__ import annotations

import json
from collections.abc import Sequence
from datetime import datetime
from pathlib import Path

from jinja2 import Environment, PackageLoader, select_autoescape
from prefect import task
from prefect.cache_policies import NO_CACHE

from ledgerband.tasks.core.context import RunContext
from ledgerband.tasks.core.task_policy import IO_RETRIES
from ledgerband.tasks.quality import codelists
from ledgerband.tasks.quality.validate import ValidationSummary, read_suite


def paths(reports_dir: Path, period: str, run_id: str) -> tuple[Path, Path]:
    """(JSON, page) of a run's validation results."""
    folder = Path(reports_dir) / str(period)
    return folder / f"{run_id}.validation.json", folder / f"{run_id}.validation.html"


def document(
    ctx: RunContext, summaries: Sequence[ValidationSummary], suite_name: str = "ledger_lines"
) -> dict:
    suite = read_suite(suite_name)
    return {
        "run_id": ctx.run_id,
        "period": str(ctx.period),
        "written_at": datetime.now().isoformat(timespec="seconds"),
        "suite": suite.name,
        "suite_rules": suite.rule_names,
        "header_rules": [e["meta"]["rule"] for e in suite.table],
        "code_lists": [
            {"name": c.name, "version": c.version, "source": c.source, "codes": len(c.codes)}
            for c in codelists.sources()
        ],
        "extracts": [
            {
                "source_file": s.source_file,
                "load_id": s.load_id,
                "rows_in_file": s.rows_in_file,
                "rows_quarantined": s.rows_quarantined,
                "accounts": s.accounts,
                "broken_chain_accounts": s.broken_chain_accounts,
                "results": s.results,
            }
            for s in summaries
        ],
    }


def render(doc: dict) -> str:
    env = Environment(
        loader=PackageLoader("ledgerband.tasks.report", "templates"),
        autoescape=select_autoescape(["html", "j2"]),
    )
    env.filters["num"] = lambda x: f"{x:,}"
    return env.get_template("validation.html.j2").render(**doc)


def keep(ctx: RunContext, summaries: Sequence[ValidationSummary]) -> Path:
    """Write the run's JSON and page (each written beside and renamed in); returns the page."""
    json_path, page_path = paths(ctx.settings.reports_dir, str(ctx.period), ctx.run_id)
    json_path.parent.mkdir(parents=True, exist_ok=True)
    doc = document(ctx, summaries)
    for target, text in ((json_path, json.dumps(doc, indent=1, default=str)), (page_path, render(doc))):
        incoming = target.with_name(target.name + ".incoming")
        incoming.write_text(text, encoding="utf-8")
        incoming.replace(target)
    return page_path


@task(
    name="keep-validation-results",
    task_run_name="keep-validation-results-{ctx.period}",
    cache_policy=NO_CACHE,
    **IO_RETRIES,
)
def keep_task(ctx: RunContext, summaries: list[ValidationSummary]) -> Path:
    return keep(ctx, summaries)
