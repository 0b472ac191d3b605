"""Gates: one `Decision` type for every check, and one `enforce` that records it and stops the run.

Every check — manifest reconciliation, the extract contract (header), the quarantine share, the feature
suite, accuracy, and the gates to come — returns a `Decision`: which gate and check, on what subject,
passed or not, the figures measured, the thresholds they were held to, and why in words. `enforce`
writes it to `published.decisions` (readers see every decision next to the snapshot it kept or replaced)
and raises `GateStopped` when it did not pass. A gate is never retried.
"""

from __future__ import annotations

import json
from collections.abc import Callable
from dataclasses import dataclass, field
from datetime import datetime

import duckdb

from ledgerband.tasks.core.context import RunContext
from ledgerband.tasks.core.errors import GateStopped
from ledgerband.tasks.core.queries import run_query
from ledgerband.tasks.core.warehouse import transaction

QUALITY = "quality"
ACCURACY = "accuracy"
RUN = "run"  # subject of a check on the whole run (not on one file)


@dataclass(frozen=True)
class Decision:
    """The outcome of one check, with every figure behind it."""

    gate: str
    check: str
    passed: bool
    reason: str
    figures: dict = field(default_factory=dict)
    thresholds: dict = field(default_factory=dict)
    subject: str = RUN
    warning: bool = False  # passed, with something the owners should look at ('warn' in the record)

    @property
    def outcome(self) -> str:
        return "stop" if not self.passed else "warn" if self.warning else "pass"


def pct(x: float | None) -> str:
    return "n/a" if x is None else f"{100 * x:.2f}%"


def record(con: duckdb.DuckDBPyConnection, ctx: RunContext, decision: Decision) -> None:
    """Write the decision (replacing this run's earlier word on the same gate, check and subject)."""
    con.execute(
        "delete from published.decisions where run_id = ? and gate = ? and check_name = ? and subject = ?",
        [ctx.run_id, decision.gate, decision.check, decision.subject],
    )
    run_query(
        con,
        "gates",
        "record_decision",
        run_id=ctx.run_id,
        period=str(ctx.period),
        gate=decision.gate,
        check_name=decision.check,
        subject=decision.subject,
        decision=decision.outcome,
        reason=decision.reason,
        figures=json.dumps(decision.figures, default=str),
        thresholds=json.dumps(decision.thresholds, default=str),
        decided_at=datetime.now(),
    )


def enforce(
    con: duckdb.DuckDBPyConnection,
    ctx: RunContext,
    decision: Decision,
    *,
    alongside: Callable[[duckdb.DuckDBPyConnection], None] | None = None,
) -> Decision:
    """Record the decision — with `alongside` in the same transaction — then stop the run if it failed.

    Raises:
        GateStopped: the decision did not pass (names the gate, the check's subject, figure and threshold).
    """
    with transaction(con):
        if alongside is not None:
            alongside(con)
        record(con, ctx, decision)
    if not decision.passed:
        raise GateStopped(decision.gate, decision.reason, check=decision.check)
    return decision


def decisions_of_run(con: duckdb.DuckDBPyConnection, run_id: str) -> dict[str, dict]:
    """This run's decisions keyed `gate.check[.subject]`, for ops.runs and status listings."""
    rows = run_query(con, "gates", "run_decisions", run_id=run_id).fetchall()
    out = {}
    for gate, check, subject, decision, reason, figures in rows:
        key = f"{gate}.{check}" + ("" if subject in (None, RUN) else f".{subject}")
        out[key] = {"decision": decision, "reason": reason, "figures": json.loads(figures)}
    return out
