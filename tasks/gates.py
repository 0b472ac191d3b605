"""Gates: measured figures against thresholds from settings, written down as a decision record.

A gate never raises by itself; the flow raises GateStopped after the decision is recorded (and, for
the accuracy gate, after the report is written), so every stop leaves its evidence behind.
"""

from __future__ import annotations

import json
from dataclasses import asdict, dataclass, field
from datetime import datetime
from pathlib import Path

import duckdb
from prefect import task
from prefect.cache_policies import NO_CACHE

from tasks.settings import Settings
from tasks.warehouse import open_warehouse, transaction


@dataclass
class Decision:
    gate: str
    passed: bool
    reason: str
    figures: dict = field(default_factory=dict)
    thresholds: dict = field(default_factory=dict)

    def to_dict(self) -> dict:
        return asdict(self)


def _pct(x: float) -> str:
    return f"{100 * x:.2f}%"


def quality_gate(validations: list[dict], settings: Settings) -> Decision:
    """Each newly loaded extract's quarantined share must not exceed quality.max_quarantine_share."""
    limit = settings.quality.max_quarantine_share
    problems = []
    figures = {}
    for v in validations:
        share = v["quarantined_share"]
        figures[v["source_file"]] = {
            "rows_in_file": v["rows_in_file"],
            "rows_quarantined": v["rows_quarantined"],
            "quarantined_share": share,
            "rule_counts": v["rule_counts"],
        }
        if share > limit:
            top = ", ".join(f"{rule} ({n})" for rule, n in list(v["rule_counts"].items())[:3])
            first = f"; first: {v['examples'][0]}" if v["examples"] else ""
            problems.append(
                f"{v['source_file']}: quarantined share {_pct(share)} ({v['rows_quarantined']} of {v['rows_in_file']} "
                f"records) exceeds quality.max_quarantine_share {_pct(limit)}; rules broken most: {top}{first}"
            )
    if problems:
        return Decision("quality", False, " | ".join(problems), figures, {"max_quarantine_share": limit})
    reason = (
        f"{len(validations)} new extract(s) within the quarantine limit of {_pct(limit)}"
        if validations
        else ("no new extract to validate (all files already accepted)")
    )
    return Decision("quality", True, reason, figures, {"max_quarantine_share": limit})


def accuracy_gate(train: dict, settings: Settings) -> Decision:
    """The champion must beat predicting the mean and place enough customers in the right band."""
    a = settings.accuracy
    thresholds = a.model_dump()
    figures = {
        k: train.get(k)
        for k in (
            "n_labelled",
            "champion",
            "baseline_rmse",
            "champion_rmse",
            "champion_mae",
            "skill_over_baseline",
            "band_accuracy",
            "within_one_band",
        )
    }
    problems = []
    if train["n_labelled"] < a.min_labelled_customers:
        problems.append(
            f"labelled customers {train['n_labelled']} < accuracy.min_labelled_customers "
            f"{a.min_labelled_customers}"
        )
    if train.get("champion") is None:
        problems.append(train.get("note") or "no model was trained")
    else:
        checks = (
            (
                "skill_over_baseline",
                "min_skill_over_baseline",
                "RMSE skill over the predict-the-mean baseline",
            ),
            ("band_accuracy", "min_band_accuracy", "out-of-fold band accuracy"),
            ("within_one_band", "min_within_one_band", "out-of-fold within-one-band rate"),
        )
        for figure, threshold, words in checks:
            if not train[figure] >= getattr(a, threshold):  # `not >=` also catches NaN
                problems.append(
                    f"{words} {_pct(train[figure])} < accuracy.{threshold} {_pct(getattr(a, threshold))}"
                )
    if problems:
        return Decision("accuracy", False, "; ".join(problems), figures, thresholds)
    return Decision(
        "accuracy",
        True,
        f"{train['champion']} RMSE {train['champion_rmse']:,.0f} vs baseline {train['baseline_rmse']:,.0f} "
        f"(skill {_pct(train['skill_over_baseline'])}); band accuracy {_pct(train['band_accuracy'])}, "
        f"within one band {_pct(train['within_one_band'])}",
        figures,
        thresholds,
    )


def record_decision(con: duckdb.DuckDBPyConnection, run_id: str, period: str, decision: Decision) -> None:
    con.execute("delete from published.decisions where run_id = ? and gate = ?", [run_id, decision.gate])
    con.execute(
        "insert into published.decisions values (?, ?, ?, ?, ?, ?, ?, ?)",
        [
            run_id,
            period,
            decision.gate,
            "pass" if decision.passed else "stop",
            decision.reason,
            json.dumps(decision.figures, default=str),
            json.dumps(decision.thresholds),
            datetime.now(),
        ],
    )


def settle_loads(con: duckdb.DuckDBPyConnection, validations: list[dict], decision: Decision) -> None:
    """Accept the new loads when the quality gate passes; otherwise mark them rejected with the reason."""
    status = "accepted" if decision.passed else "rejected"
    for v in validations:
        con.execute(
            "update ops.loads set status = ?, reason = coalesce(reason || '; ', '') || ?, decided_at = ? "
            "where load_id = ?",
            [
                status,
                decision.reason if not decision.passed else "passed the quality gate",
                datetime.now(),
                v["load_id"],
            ],
        )


def record_stop(con: duckdb.DuckDBPyConnection, run_id: str, period: str, gate: str, reason: str) -> None:
    """Write down a stop raised outside a gate task (manifest, header or feature rules), unless that gate
    already recorded its own stop with figures for this run."""
    earlier = con.execute(
        "select decision, figures, thresholds from published.decisions where run_id = ? and gate = ?",
        [run_id, gate],
    ).fetchall()
    if earlier and earlier[0][0] == "stop":
        return
    # A later stop of a gate that had passed (e.g. the feature suite after the extracts passed) keeps the
    # figures of the pass, so the record still says what was measured.
    figures, thresholds = (json.loads(earlier[0][1]), json.loads(earlier[0][2])) if earlier else ({}, {})
    record_decision(con, run_id, period, Decision(gate, False, reason, figures, thresholds))


@task(name="record-gate-stop", cache_policy=NO_CACHE)
def record_stop_task(warehouse: Path, run_id: str, period: str, gate: str, reason: str) -> None:
    with open_warehouse(warehouse) as con:
        record_stop(con, run_id, period, gate, reason)


@task(name="quality-gate", cache_policy=NO_CACHE)
def quality_gate_task(
    warehouse: Path, run_id: str, period: str, validations: list[dict], settings: Settings
) -> dict:
    decision = quality_gate(validations, settings)
    with open_warehouse(warehouse) as con:
        with transaction(con):
            record_decision(con, run_id, period, decision)
            settle_loads(con, validations, decision)
    return decision.to_dict()


@task(name="accuracy-gate", cache_policy=NO_CACHE)
def accuracy_gate_task(warehouse: Path, run_id: str, period: str, train: dict, settings: Settings) -> dict:
    decision = accuracy_gate(train, settings)
    with open_warehouse(warehouse) as con:
        record_decision(con, run_id, period, decision)
    return decision.to_dict()
