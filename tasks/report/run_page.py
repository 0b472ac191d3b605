"""What a run leaves on its Prefect run page: a markdown summary and a table of its gate decisions."""

from __future__ import annotations

import json
from pathlib import Path

from ledgerband.tasks.core.context import RunContext
from ledgerband.tasks.core.queries import run_query
from ledgerband.tasks.core.warehouse import open_warehouse


def run_artifacts(ctx: RunContext, status: str, report: Path | None) -> None:
    """Create the run's artifacts (best effort: a run is never failed by its page decoration)."""
    from prefect.artifacts import create_markdown_artifact, create_table_artifact

    with open_warehouse(ctx.warehouse, ctx.settings.scale) as con:
        rows = run_query(con, "gates", "run_decisions", run_id=ctx.run_id).fetchall()
    decisions = [
        {"gate": g, "check": c, "subject": s, "decision": d, "reason": r[:500]} for g, c, s, d, r, _ in rows
    ]
    accuracy = next((json.loads(f) for g, c, _, _, _, f in rows if g == "accuracy" and c == "accuracy"), {})
    key = f"ledgerband-{ctx.period}"
    lines = [
        f"# ledgerband {ctx.period}: {status}",
        "",
        f"Run `{ctx.run_id}` · report: `{report or 'not written'}`",
        "",
        "| gate | check | on | decision | why |",
        "|---|---|---|---|---|",
        *[
            f"| {d['gate']} | {d['check']} | {d['subject']} | **{d['decision']}** | {d['reason'].replace('|', '/')} |"
            for d in decisions
        ],
    ]
    if accuracy.get("champion"):
        lines += [
            "",
            f"Champion **{accuracy['champion']}**: MAE {accuracy['champion_mae']:,.0f} vs "
            f"{accuracy['mae_baseline']} {accuracy['baseline_mae']:,.0f}; band accuracy "
            f"{accuracy['band_accuracy']:.1%}; {accuracy['interval_level']:.0%} intervals cover "
            f"{accuracy['coverage']:.1%} held out.",
        ]
    lines += ["", "Internal reporting only: never a substitute for verified income in credit decisions."]
    create_markdown_artifact(key=key, markdown="\n".join(lines), description=f"ledgerband run {ctx.period}")
    create_table_artifact(key=f"{key}-decisions", table=decisions, description="Gate decisions of the run")
