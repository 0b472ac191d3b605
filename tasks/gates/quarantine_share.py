"""The quarantine-share check of the quality gate: how much of each new extract was set aside."""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING

from prefect import task
from prefect.cache_policies import NO_CACHE

from ledgerband.tasks.core.context import RunContext
from ledgerband.tasks.core.settings import Settings
from ledgerband.tasks.core.warehouse import open_warehouse
from ledgerband.tasks.gates import QUALITY, Decision, enforce, pct
from ledgerband.tasks.ingest import loads
from ledgerband.tasks.ingest.extract_contract import VERIFIED_INCOMES_FILE
from ledgerband.tasks.quality.validate import ValidationSummary

if TYPE_CHECKING:
    from ledgerband.tasks.quality.verified import VerifiedSummary


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


def verified_incomes_check(summary: VerifiedSummary, settings: Settings) -> Decision:
    """The verified incomes file's quarantined share, held to quality.max_quarantine_share: a warning past it,
    never a stop. The file is optional and secondary (the ledger's figures do not depend on it), so its
    bad records are set aside and the run goes on; only a file unreadable as a whole is refused, at ingest.
    The reason holds counts and rule names only: the file is personal data."""
    limit = settings.quality.max_quarantine_share
    subject = Path(summary.source_file).name if summary.source_file else VERIFIED_INCOMES_FILE
    share = summary.quarantined_share
    figures = {
        "rows_in_file": summary.rows_in_file,
        "rows_accepted": summary.rows_accepted,
        "rows_quarantined": summary.rows_quarantined,
        "quarantined_share": share,
        "rule_counts": summary.rule_counts,
    }
    thresholds = {"max_quarantine_share": limit, "stops_the_run": False}
    if summary.source_file is None:
        reason = f"no {VERIFIED_INCOMES_FILE} this run (optional): 0 verified incomes"
        return Decision(QUALITY, "verified_incomes", True, reason, figures, thresholds, subject=subject)
    top = ", ".join(f"{rule} ({n})" for rule, n in list(summary.rule_counts.items())[:3])
    counts = (
        f"{summary.rows_accepted} of {summary.rows_in_file} records accepted, {summary.rows_quarantined} "
        f"quarantined ({pct(share)})" + (f"; rules broken most: {top}" if top else "")
    )
    if share > limit:
        reason = (
            f"warning: {subject}: {counts}; more than quality.max_quarantine_share {pct(limit)}. The run goes "
            "on (an optional file); the sender should look at quarantine.verified_incomes"
        )
        return Decision(QUALITY, "verified_incomes", True, reason, figures, thresholds, subject, warning=True)
    return Decision(QUALITY, "verified_incomes", True, f"{subject}: {counts}", figures, thresholds, subject)


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
