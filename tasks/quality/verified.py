"""Validate the verified incomes file this run read: its suite, its quarantine, its (never stopping) decision.

The suite `expectations/verified_incomes.json` is evaluated the way the ledger suite is: with
quality.engine "duckdb" every rule with a plain SQL reading is one predicate over the load
(tasks/quality/pushdown.py); GX evaluates the rest, or all of them with engine "gx". The file holds at most
one record per customer, so GX gets it whole, not in chunks, and the uniqueness rule needs no split.

Some rules depend on the run's period (a verification after the period's end, or older than
verified.max_age_months before it), so every run judges the file it read again and keeps its findings
under its own run_id in quarantine.verified_incomes. A record's reason names the line, the rules and the
fields that broke them (a duplicate customer: the other lines), never a value.

A bad record never stops the run: the file is an optional, secondary input, and the ledger's figures do
not depend on it. The quarantined share is recorded as a quality-gate decision that warns past
quality.max_quarantine_share (tasks/gates/quarantine_share.verified_incomes_check).
"""

from __future__ import annotations

from collections import defaultdict
from dataclasses import dataclass, field
from datetime import date, datetime

import duckdb
import pandas as pd
from prefect import task
from prefect.cache_policies import NO_CACHE

from ledgerband.tasks.core import queries
from ledgerband.tasks.core.context import RunContext
from ledgerband.tasks.core.warehouse import open_warehouse, transaction
from ledgerband.tasks.gates import Decision, enforce
from ledgerband.tasks.gates.quarantine_share import verified_incomes_check
from ledgerband.tasks.ingest import loads
from ledgerband.tasks.quality import pushdown
from ledgerband.tasks.quality.validate import _run, read_suite

SUITE = "verified_incomes"
UNIQUE_RULE = "customer_id_unique"
# Helper columns, and the received field a reason names instead.
_SHOWN_AS = {
    "customer_in_reference": "customer_id",
    "verified_on_is_date": "verified_on",
    "verified_on_value": "verified_on",
    "annual_net_income_value": "annual_net_income",
}
_QUARANTINE_COLUMNS = [
    "run_id",
    "load_id",
    "source_file",
    "source_line",
    "failed_rules",
    "reason",
    "quarantined_at",
]


@dataclass(frozen=True)
class VerifiedSummary:
    """What this run's check of the verified incomes file found: counts by rule, never a value."""

    source_file: str | None  # None: the run had no file
    load_id: str | None
    rows_in_file: int
    rows_accepted: int
    rows_quarantined: int
    rule_counts: dict[str, int] = field(default_factory=dict)

    @property
    def quarantined_share(self) -> float:
        return self.rows_quarantined / self.rows_in_file if self.rows_in_file else 0.0


def suite_params(ctx: RunContext) -> dict:
    """The suite's $PARAMETERs for the run's period and settings."""
    verified = ctx.settings.verified
    return {
        "period_end": ctx.period.end,
        "oldest_verified_on": oldest_verified_on(ctx),
        "max_annual_income": verified.max_annual_income,
        "ledger_currencies": [ctx.settings.bands.currency],
    }


def oldest_verified_on(ctx: RunContext) -> date:
    """The earliest verified_on still recent: the last day of the month verified.max_age_months before the
    period's (a period ending 31 October 2026 with 12 months keeps verifications from 31 October 2025)."""
    return ctx.period.shift(-ctx.settings.verified.max_age_months).end


def _findings(
    con: duckdb.DuckDBPyConnection, ctx: RunContext, load_id: str, rules: list[dict]
) -> dict[int, dict[str, str]]:
    """line -> rule -> the field it concerns, for every record that breaks a row rule."""
    params = suite_params(ctx)
    query = queries.query_text("quality", "verified_income_checks")
    query_params = queries.bind("quality", "verified_income_checks", {"load_id": load_id})
    failures: dict[int, dict[str, str]] = defaultdict(dict)
    pushed: list[dict] = []
    if ctx.settings.quality.engine == "duckdb":
        relation = con.sql(query, params=query_params)
        types = dict(zip(relation.columns, (str(t) for t in relation.types), strict=True))
        pushed = [e for e in rules if pushdown.translatable(e, types)]
        if pushed:
            _, broken, _ = pushdown.evaluate(con, query, query_params, pushed, params, keep_lines=0)
            for line, hits in broken.items():
                for i in hits:
                    failures[line][pushed[i]["meta"]["rule"]] = _field(pushed[i])
    by_gx = [e for e in rules if e not in pushed]
    if by_gx:
        frame = con.sql(query, params=query_params).to_arrow_table().to_pandas()
        for r in _run(f"{SUITE}.row", by_gx, frame, params):
            if r.success:
                continue
            exp = {"kwargs": r.expectation_config.kwargs}
            for item in r.result.get("unexpected_index_list") or []:
                failures[int(item["source_line"])][r.expectation_config.meta["rule"]] = _field(exp)
    return failures


def _field(exp: dict) -> str:
    column = exp["kwargs"]["column"]
    return _SHOWN_AS.get(column, column)


def _duplicate_lines(con: duckdb.DuckDBPyConnection, load_id: str) -> dict[int, list[int]]:
    """line -> the other lines of the same customer, for customers listed more than once (the ids stay here)."""
    frame = con.execute(
        "select source_line, customer_id from raw.verified_incomes where load_id = ? and customer_id is not null",
        [load_id],
    ).df()
    out: dict[int, list[int]] = {}
    for _, lines in frame.groupby("customer_id")["source_line"]:
        if len(lines) > 1:
            for line in lines:
                out[int(line)] = sorted(int(other) for other in lines if other != line)
    return out


def _reason(line: int, rules: dict[str, str], order: dict[str, int], duplicates: dict[int, list[int]]) -> str:
    parts = []
    for rule in sorted(rules, key=order.__getitem__):
        detail = f"field {rules[rule]}"
        if rule == UNIQUE_RULE and duplicates.get(line):
            detail += ", the same customer also on line " + ", ".join(str(n) for n in duplicates[line])
        parts.append(f"{rule} ({detail})")
    return f"line {line}: " + "; ".join(parts)


def validate_verified(con: duckdb.DuckDBPyConnection, ctx: RunContext) -> VerifiedSummary:
    """Judge the verified incomes file this run read (ops.verified_income_runs) for the run's period.

    Writes the run's findings to quarantine.verified_incomes (replacing any earlier ones of the same run),
    the counts to ops.verified_income_runs and the load's rows_quarantined. A run without a file is marked
    checked with 0 records.
    """
    row = con.execute(
        "select load_id, source_file, rows_in_file from ops.verified_income_runs where run_id = ?",
        [ctx.run_id],
    ).fetchall()
    load_id, source_file, rows_in_file = row[0] if row else (None, None, 0)
    failures: dict[int, dict[str, str]] = {}
    order: dict[str, int] = {}
    if load_id is not None:
        parts = read_suite(SUITE)
        order = {rule: i for i, rule in enumerate(parts.rule_names)}
        failures = _findings(con, ctx, load_id, parts.whole_column + parts.row)
    duplicates = _duplicate_lines(con, load_id) if load_id and failures else {}
    now = datetime.now()
    quarantine = pd.DataFrame(
        [
            {
                "run_id": ctx.run_id,
                "load_id": load_id,
                "source_file": source_file,
                "source_line": line,
                "failed_rules": sorted(rules, key=order.__getitem__),
                "reason": _reason(line, rules, order, duplicates),
                "quarantined_at": now,
            }
            for line, rules in sorted(failures.items())
        ],
        columns=_QUARANTINE_COLUMNS,
    )
    quarantined = len(quarantine)
    accepted = int(rows_in_file) - quarantined
    with transaction(con):
        con.execute("delete from quarantine.verified_incomes where run_id = ?", [ctx.run_id])
        if quarantined:
            con.register("verified_quarantine_rows", quarantine)
            con.execute(
                "insert into quarantine.verified_incomes by name select * from verified_quarantine_rows"
            )
            con.unregister("verified_quarantine_rows")
        if row:
            con.execute(
                "update ops.verified_income_runs set rows_accepted = ?, rows_quarantined = ?, checked_at = ? "
                "where run_id = ?",
                [accepted, quarantined, now, ctx.run_id],
            )
        else:  # validation called without ingest (tests): the run had no file
            con.execute(
                "insert into ops.verified_income_runs values (?, ?, null, null, 0, 0, 0, ?)",
                [ctx.run_id, str(ctx.period), now],
            )
        if load_id is not None:
            loads.set_quarantined(con, load_id, quarantined)
    counts: dict[str, int] = defaultdict(int)
    for rules in failures.values():
        for rule in rules:
            counts[rule] += 1
    return VerifiedSummary(
        source_file=source_file,
        load_id=load_id,
        rows_in_file=int(rows_in_file),
        rows_accepted=accepted,
        rows_quarantined=quarantined,
        rule_counts=dict(sorted(counts.items(), key=lambda kv: (-kv[1], order.get(kv[0], 0)))),
    )


@task(
    name="validate-verified-incomes",
    task_run_name="validate-verified-incomes-{ctx.period}",
    cache_policy=NO_CACHE,
)
def validate_verified_task(ctx: RunContext) -> Decision:
    """The verified incomes suite for this run, then its decision (recorded; never stops the run)."""
    with open_warehouse(ctx.warehouse, ctx.settings.scale) as con:
        summary = validate_verified(con, ctx)
        return enforce(con, ctx, verified_incomes_check(summary, ctx.settings))
