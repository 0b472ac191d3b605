"""The quarantine-share check of the quality gate: how much of each new extract was set aside."""

from __future__ import annotations

from collections.abc import Sequence

from prefect import task
from prefect.cache_policies import NO_CACHE

from ledgerband.tasks.core.context import RunContext
from ledgerband.tasks.core.settings import Settings
from ledgerband.tasks.core.warehouse import open_warehouse
from ledgerband.tasks.gates import QUALITY, Decision, enforce, pct
from ledgerband.tasks.ingest import loads
from ledgerband.tasks.quality.validate import ValidationSummary


def quality_gate(validations: Sequence[ValidationSummary], settings: Settings) -> Decision:
    """Each newly loaded extract's quarantined share must not exceed quality.max_quarantine_share, and
    the share of its accounts whose balances do not chain must not exceed quality.max_broken_chain_share."""
    limit = settings.quality.max_quarantine_share
    chain_limit = settings.quality.max_broken_chain_share
    problems = []
    figures = {}
    for v in validations:
        share = v.quarantined_share
        figures[v.source_file] = {
            "rows_in_file": v.rows_in_file,
            "rows_quarantined": v.rows_quarantined,
            "quarantined_share": share,
            "rule_counts": v.rule_counts,
            "accounts": v.accounts,
            "broken_chain_accounts": v.broken_chain_accounts,
        }
        if v.broken_chain_share > chain_limit:
            problems.append(
                f"{v.source_file}: {v.broken_chain_accounts} of {v.accounts} accounts "
                f"({pct(v.broken_chain_share)}) break rule balance_chain_continuous, more than "
                f"quality.max_broken_chain_share {pct(chain_limit)}: postings are missing or altered"
            )
        if share > limit:
            top = ", ".join(f"{rule} ({n})" for rule, n in list(v.rule_counts.items())[:3])
            first = f"; first: {v.examples[0]}" if v.examples else ""
            problems.append(
                f"{v.source_file}: quarantined share {pct(share)} ({v.rows_quarantined} of {v.rows_in_file} "
                f"records) exceeds quality.max_quarantine_share {pct(limit)}; rules broken most: {top}{first}"
            )
    thresholds = {"max_quarantine_share": limit, "max_broken_chain_share": chain_limit}
    if problems:
        return Decision(QUALITY, "quarantine_share", False, " | ".join(problems), figures, thresholds)
    reason = (
        f"{len(validations)} new extract(s) within the quarantine limit of {pct(limit)}"
        if validations
        else "no new extract to validate (all files already accepted)"
    )
    return Decision(QUALITY, "quarantine_share", True, reason, figures, thresholds)


@task(name="quality-gate", task_run_name="quality-gate-{ctx.period}", cache_policy=NO_CACHE)
def quality_gate_task(ctx: RunContext, validations: list[ValidationSummary]) -> Decision:
    """Decide on the run's new extracts; accept or reject them in the same transaction as the decision."""
    decision = quality_gate(validations, ctx.settings)
    load_ids = [v.load_id for v in validations]
    reason = "passed the quality gate" if decision.passed else decision.reason
    with open_warehouse(ctx.warehouse, ctx.settings.scale) as con:
        return enforce(
            con, ctx, decision, alongside=lambda c: loads.settle(c, load_ids, decision.passed, reason)
        )
