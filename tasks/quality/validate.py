"""Validate: run the expectation suites in `expectations/` with Great Expectations, in bounded chunks.

The suite file is the one place a rule is declared. How a rule is evaluated follows from its type:
- `expect_table_*` rules look at the file's header and stop the run when they fail;
- `expect_column_values_to_be_unique` needs every record at once, so it runs on just that column of
  the whole extract (two narrow columns stay small even at tens of millions of records);
- every other `expect_column_values_*` rule runs chunk by chunk (`quality.chunk_rows` records), and
  the records that break it are quarantined with the rule's name.
A rule GX cannot evaluate is an error, never a pass (GX reports such failures only in its result).
"""

from __future__ import annotations

import copy
import json
import logging
from collections import defaultdict
from dataclasses import dataclass, field
from datetime import datetime
from functools import lru_cache
from importlib import resources
from pathlib import Path
from typing import Any

import duckdb
import pandas as pd
from prefect import task
from prefect.cache_policies import NO_CACHE

from ledgerband.tasks.core import queries
from ledgerband.tasks.core.context import RunContext
from ledgerband.tasks.core.errors import LedgerbandError, ValidationEngineError
from ledgerband.tasks.core.settings import Settings
from ledgerband.tasks.core.warehouse import open_warehouse, transaction
from ledgerband.tasks.gates import QUALITY, Decision, enforce
from ledgerband.tasks.ingest import loads
from ledgerband.tasks.ingest.records import INGEST_RULES
from ledgerband.tasks.quality import accepted_txn_ids, codelists, pushdown

SUITES_PACKAGE = "ledgerband.expectations"
WHOLE_COLUMN_TYPES = frozenset({"expect_column_values_to_be_unique"})
ROW_TYPE_PREFIX = "expect_column_values_to_"
RESULT_FORMAT = {"result_format": "COMPLETE", "unexpected_index_column_names": ["source_line"]}
# Helper columns computed for the rules, and the received field a person should see instead.
_SHOWN_AS = {
    "amount_value": "amount",
    "booking_date_value": "booking_date",
    "txn_id_loaded_before": "txn_id",
    "customer_in_reference": "customer_id",
    "balance_chain_broken": "account_id",
    "btc_domain_listed": "bank_txn_code",
    "btc_domain_family_listed": "bank_txn_code",
    "btc_subfamily_listed": "bank_txn_code",
    "purpose_code_listed": "purpose_code",
    "merchant_category_listed": "merchant_category",
}
_EXAMPLES_KEPT = 5
# Helper columns that hold the name of the received field that broke the rule (text hygiene).
_NAMES_A_FIELD = ("field_with_control_character", "field_too_long")
# The rule whose breaks are counted by account as well as by record (quality.max_broken_chain_share).
CHAIN_RULE = "balance_chain_continuous"


@dataclass(frozen=True)
class SuiteParts:
    """A suite split by how its rules are evaluated (each part is a list of expectation configs)."""

    name: str
    table: list[dict]
    whole_column: list[dict]
    row: list[dict]

    @property
    def rule_names(self) -> list[str]:
        return [e["meta"]["rule"] for e in self.table + self.whole_column + self.row]


def read_suite(name: str, directory: Path | None = None) -> SuiteParts:
    """Read `expectations/<name>.json` (shipped in the package) and sort its rules by how they are evaluated."""
    path = (directory / f"{name}.json") if directory else resources.files(SUITES_PACKAGE) / f"{name}.json"
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, json.JSONDecodeError) as exc:
        raise LedgerbandError(f"expectation suite {path}: cannot be read ({exc})") from exc
    parts: dict[str, list[dict]] = {"table": [], "whole_column": [], "row": []}
    seen: set[str] = set()
    for i, exp in enumerate(data.get("expectations", [])):
        rule = (exp.get("meta") or {}).get("rule")
        if not rule:
            raise LedgerbandError(
                f"expectation suite {path}: expectation #{i + 1} ({exp.get('type')}) has no meta.rule"
            )
        if rule in seen:
            raise LedgerbandError(f"expectation suite {path}: rule name {rule!r} is used twice")
        seen.add(rule)
        kind = exp.get("type", "")
        if kind.startswith("expect_table_"):
            parts["table"].append(exp)
        elif kind in WHOLE_COLUMN_TYPES:
            parts["whole_column"].append(exp)
        elif kind.startswith(ROW_TYPE_PREFIX):
            parts["row"].append(exp)
        else:
            raise LedgerbandError(
                f"expectation suite {path}: rule {rule!r} has type {kind!r}, which this pipeline cannot yet evaluate "
                "in chunks (supported: expect_table_*, expect_column_values_*)"
            )
    return SuiteParts(name=name, **parts)


@lru_cache(maxsize=1)
def _gx():
    """One ephemeral GX context and pandas asset per process (GX imports in ~5 s: import lazily)."""
    import great_expectations as gx
    from great_expectations.data_context.types.base import ProgressBarsConfig

    logging.getLogger("great_expectations").setLevel(logging.WARNING)
    # This module pins its own logger to INFO and announces a temporary docs folder on every context.
    logging.getLogger("great_expectations.data_context.types.base").setLevel(logging.WARNING)
    context = gx.get_context(mode="ephemeral")
    context.variables.progress_bars = ProgressBarsConfig(globally=False)
    asset = context.data_sources.add_pandas("ledgerband_frames").add_dataframe_asset("frame")
    return gx, context, asset.add_batch_definition_whole_dataframe("whole_frame")


def _run(
    suite_name: str,
    expectations: list[dict],
    frame: pd.DataFrame,
    params: dict | None = None,
    index_column: str = "source_line",
) -> list[Any]:
    """Validate `frame` against `expectations`; returns GX results. Raises if any rule could not be evaluated."""
    if not expectations:
        return []
    gx, _, batch_definition = _gx()
    suite = gx.ExpectationSuite(name=suite_name, expectations=copy.deepcopy(expectations))
    if len(suite.expectations) != len(expectations):  # GX silently drops unknown types
        raise ValidationEngineError(
            f"suite {suite_name}: GX accepted {len(suite.expectations)} of {len(expectations)} expectations; "
            "check the expectation types"
        )
    batch = batch_definition.get_batch(batch_parameters={"dataframe": frame})
    result_format = {**RESULT_FORMAT, "unexpected_index_column_names": [index_column]}
    result = batch.validate(suite, expectation_parameters=params or {}, result_format=result_format)
    for r in result.results:
        info = r.exception_info or {}
        raised = (
            info.get("raised_exception")
            if "raised_exception" in info
            else any(isinstance(v, dict) and v.get("raised_exception") for v in info.values())
        )
        if raised:
            message = info.get("exception_message") or next(
                (v.get("exception_message") for v in info.values() if isinstance(v, dict)), "unknown error"
            )
            raise ValidationEngineError(
                f"suite {suite_name}: rule {r.expectation_config.meta.get('rule')} could not be evaluated: {message}"
            )
    return list(result.results)


def extract_contract_decision(
    columns: list[str], source: Path, suite_name: str = "ledger_lines", engine: str = "duckdb"
) -> Decision:
    """The suite's table-level rules on a file's header: the extract contract check of the quality gate.

    With engine "duckdb", the header rules with a plain reading are evaluated by `pushdown.header_result`
    (no GX import at ingest); the others, and all of them with engine "gx", by GX.
    """
    parts = read_suite(suite_name)
    outcomes: list[tuple[str, dict]] = []  # (rule, GX-shaped result)
    by_gx = []
    for exp in parts.table:
        local = pushdown.header_result(exp, columns) if engine == "duckdb" else None
        if local is None:
            by_gx.append(exp)
        else:
            outcomes.append((exp["meta"]["rule"], local))
    if by_gx:
        frame = pd.DataFrame({c: pd.Series([], dtype="str") for c in columns})
        for r in _run(f"{suite_name}.table", by_gx, frame):
            outcomes.append((r.expectation_config.meta["rule"], {"success": r.success, "result": r.result}))
    order = {e["meta"]["rule"]: i for i, e in enumerate(parts.table)}
    broken = []
    for rule, r in sorted(outcomes, key=lambda o: order[o[0]]):
        if not r["success"]:
            details = (r["result"] or {}).get("details", {}).get("mismatched") or {
                "observed": r["result"].get("observed_value")
            }
            broken.append(f"line 1 (header) breaks rule {rule}: {details}")
    figures = {"columns": list(columns), "broken_rules": broken}
    thresholds = {"rules": [e["meta"]["rule"] for e in parts.table]}
    reason = f"{source}: " + ("; ".join(broken) if broken else "header matches the contract")
    return Decision(
        QUALITY, "extract_contract", not broken, reason, figures, thresholds, subject=Path(source).name
    )


@dataclass
class ValidationSummary:
    load_id: str
    source_file: str
    rows_in_file: int
    rows_quarantined: int
    rule_counts: dict[str, int] = field(default_factory=dict)
    examples: list[str] = field(default_factory=list)
    accounts: int = 0
    broken_chain_accounts: int = 0
    results: list[dict] = field(default_factory=list)
    """GX's result per rule (its own JSON form), merged over the chunks: counts summed, the line numbers of
    the first RESULTS_KEPT unexpected records kept (not their values). Written per run by
    tasks/report/validation_page.py."""

    @property
    def broken_chain_share(self) -> float:
        return self.broken_chain_accounts / self.accounts if self.accounts else 0.0

    @property
    def quarantined_share(self) -> float:
        return self.rows_quarantined / self.rows_in_file if self.rows_in_file else 0.0


RESULTS_KEPT = 20


def _merge_result(kept: dict[str, dict], r: Any) -> None:
    """Fold one chunk's GX result for a rule into the run's record of that rule."""
    rule = r.expectation_config.meta["rule"]
    result = r.result or {}
    entry = kept.setdefault(
        rule,
        {
            "expectation_config": r.expectation_config.to_json_dict(),
            "success": True,
            "chunks": 0,
            "result": {
                "element_count": 0,
                "missing_count": 0,
                "unexpected_count": 0,
                "partial_unexpected_index_list": [],
            },
        },
    )
    entry["success"] = entry["success"] and bool(r.success)
    entry["chunks"] += 1
    totals = entry["result"]
    for key in ("element_count", "missing_count", "unexpected_count"):
        totals[key] += int(result.get(key) or 0)
    room = RESULTS_KEPT - len(totals["partial_unexpected_index_list"])
    if room > 0:
        # Line numbers only: the values stay in quarantine.ledger_lines, where the ledger's access rules
        # apply (results files travel further: report folders, attachments).
        items = (result.get("unexpected_index_list") or [])[:room]
        totals["partial_unexpected_index_list"].extend(
            {"source_line": int(item["source_line"])} for item in items
        )
    checked = totals["element_count"] - totals["missing_count"]
    totals["unexpected_percent"] = 100.0 * totals["unexpected_count"] / checked if checked else 0.0


def _evaluate_pushed(
    con: duckdb.DuckDBPyConnection,
    query: str,
    query_params: dict,
    rules: list[dict],
    params: dict,
    load_id: str,
    kept: dict[str, dict],
    failures: dict[int, dict[str, str]],
) -> None:
    """The rules DuckDB evaluates (tasks/quality/pushdown.py): their results in GX's form, their broken records
    named as the GX path names them."""
    if not rules:
        return
    carry = tuple(c for c in _NAMES_A_FIELD if any(e["kwargs"]["column"] == c for e in rules))
    outcomes, broken, helpers = pushdown.evaluate(
        con, query, query_params, rules, params, RESULTS_KEPT, carry
    )
    for exp, outcome in zip(rules, outcomes, strict=True):
        checked = outcome.element_count - outcome.missing_count
        kept[exp["meta"]["rule"]] = {
            "expectation_config": {"type": exp["type"], "kwargs": exp["kwargs"], "meta": exp["meta"]},
            "success": outcome.success(exp["kwargs"].get("mostly")),
            "chunks": 1,
            "evaluated_by": "duckdb",
            "result": {
                "element_count": outcome.element_count,
                "missing_count": outcome.missing_count,
                "unexpected_count": outcome.unexpected_count,
                "partial_unexpected_index_list": [{"source_line": line} for line in outcome.lines],
                "unexpected_percent": 100.0 * outcome.unexpected_count / checked if checked else 0.0,
            },
        }
    if not broken:
        return
    # The fields as received, for the broken records only.
    text = (
        con.execute(
            "select * from raw.ledger_lines where load_id = ? and list_contains(?, source_line)",
            [load_id, list(broken)],
        )
        .df()
        .set_index("source_line")
    )
    for line, hits in broken.items():
        for i in hits:
            rule, column = rules[i]["meta"]["rule"], rules[i]["kwargs"]["column"]
            failures[line][rule] = _broken_field(column, helpers[line].get(column), text, line)


def _broken_field(column: str, helper, text: pd.DataFrame, line: int, fallback=None) -> str:
    """How a quarantined record's broken field is named in its reason: the field as received (a helper
    column is shown by the field it was derived from; a text-hygiene helper holds the field's name)."""
    if column in _NAMES_A_FIELD:
        field = str(helper)
        return f"{field}={str(text.at[line, field])[:60]!r}"
    shown = _SHOWN_AS.get(column, column)
    value = text.at[line, shown] if shown in text.columns else fallback
    return f"{shown}={None if pd.isna(value) else str(value)!r}"


def validate_load(
    con: duckdb.DuckDBPyConnection, load_id: str, settings: Settings, suite_name: str = "ledger_lines"
) -> ValidationSummary:
    """Run the ledger suite on one load and quarantine the records that break a row-level rule."""
    facts = loads.load_facts(con, load_id)
    if facts is None:
        raise LedgerbandError(f"no load {load_id} in ops.loads")
    source_file, period, rows_in_file, _ = facts
    parts = read_suite(suite_name)
    params = {
        "period_start": period.start,
        "period_end": period.end,
        "ledger_currencies": [settings.bands.currency],
    }
    con.register("code_lists", codelists.as_table())
    accepted_txn_ids.sync(
        con
    )  # the accepted loads' txn_ids, in line with ops.loads, for txn_id_not_loaded_before
    failures: dict[int, dict[str, str]] = defaultdict(dict)  # line -> rule -> offending value
    kept: dict[str, dict] = {}  # rule -> GX result, merged over the chunks

    def collect(results: list[Any], frame: pd.DataFrame) -> None:
        text = frame.set_index("source_line")
        for r in results:
            _merge_result(kept, r)
            if r.success:
                continue
            rule = r.expectation_config.meta["rule"]
            column = r.expectation_config.kwargs.get("column")
            for item in r.result.get("unexpected_index_list") or []:
                line = int(item["source_line"])
                helper = text.at[line, column] if column in _NAMES_A_FIELD else None
                failures[line][rule] = _broken_field(column, helper, text, line, item.get(column))

    # The load's records with the helper columns the suite's rules read (txn_id_loaded_before,
    # customer_in_reference, balance_chain_broken, code-list and text-hygiene helpers), explained in the file.
    query = queries.query_text("quality", "ledger_checks")
    query_params = queries.bind(
        "quality",
        "ledger_checks",
        {"load_id": load_id, "max_field_length": settings.quality.max_field_length},
    )
    relation = con.sql(query, params=query_params)
    pushed: list[dict] = []
    if settings.quality.engine == "duckdb":
        types = dict(zip(relation.columns, (str(t) for t in relation.types), strict=True))
        pushed = [e for e in parts.row + parts.whole_column if pushdown.translatable(e, types)]
        _evaluate_pushed(con, query, query_params, pushed, params, load_id, kept, failures)
    by_gx_row = [e for e in parts.row if e not in pushed]
    if by_gx_row:
        for batch in relation.to_arrow_reader(settings.quality.chunk_rows):
            frame = batch.to_pandas()
            collect(_run(f"{suite_name}.row", by_gx_row, frame, params), frame)
    for exp in [e for e in parts.whole_column if e not in pushed]:
        column = exp["kwargs"]["column"]
        frame = (
            con.sql(
                f'select source_line, "{column}" from raw.ledger_lines where load_id = $load_id',
                params={"load_id": load_id},
            )
            .to_arrow_table()
            .to_pandas()
        )
        collect(_run(f"{suite_name}.whole", [exp], frame), frame)

    order = {rule: i for i, rule in enumerate(parts.rule_names)}
    now = datetime.now()
    quarantine = pd.DataFrame(
        [
            {
                "load_id": load_id,
                "source_file": source_file,
                "source_line": line,
                "failed_rules": sorted(rules, key=order.__getitem__),
                "reason": f"line {line}: "
                + "; ".join(f"{rule} ({rules[rule]})" for rule in sorted(rules, key=order.__getitem__)),
                "raw_record": None,
                "quarantined_at": now,
            }
            for line, rules in sorted(failures.items())
        ],
        columns=[
            "load_id",
            "source_file",
            "source_line",
            "failed_rules",
            "reason",
            "raw_record",
            "quarantined_at",
        ],
    )
    with transaction(con):
        # Rerunning validation on the same load replaces its rule findings (records quarantined while
        # the file was read stay).
        queries.run_query(
            con, "quality", "clear_rule_findings", load_id=load_id, ingest_rules=list(INGEST_RULES)
        )
        if len(quarantine):
            con.register("quarantine_rows", quarantine)
            queries.run_query(con, "quality", "write_rule_findings")
            con.unregister("quarantine_rows")
        total_quarantined = con.execute(
            "select count(*)::bigint from quarantine.ledger_lines where load_id = ?", [load_id]
        ).fetchall()[0][0]
        loads.set_quarantined(con, load_id, total_quarantined)

    counts: dict[str, int] = defaultdict(int)
    for rules in failures.values():
        for rule in rules:
            counts[rule] += 1
    ingest_counts = queries.run_query(
        con, "quality", "ingest_rule_counts", load_id=load_id, ingest_rules=list(INGEST_RULES)
    )
    for rule, n in ingest_counts.fetchall():
        counts[rule] += int(n)
    examples = queries.run_query(
        con, "quality", "quarantine_examples", load_id=load_id, examples=_EXAMPLES_KEPT
    ).fetchall()
    accounts, broken_accounts = queries.run_query(
        con, "quality", "chain_account_counts", load_id=load_id, chain_rule=CHAIN_RULE
    ).fetchall()[0]
    return ValidationSummary(
        results=[kept[rule] for rule in parts.rule_names if rule in kept],
        load_id=load_id,
        source_file=source_file,
        rows_in_file=int(rows_in_file),
        rows_quarantined=int(total_quarantined),
        rule_counts=dict(sorted(counts.items(), key=lambda kv: -kv[1])),
        examples=[e[0] for e in examples],
        accounts=int(accounts),
        broken_chain_accounts=int(broken_accounts),
    )


def validate_features(con: duckdb.DuckDBPyConnection, suite_name: str = "customer_features") -> Decision:
    """Run the feature suite on features.customer (one narrow row per customer: validated whole).

    Any broken rule fails the check: a broken feature table is a bug upstream, not a bad record to set
    aside. The reason names each rule, how many customers and a few of them.
    """
    parts = read_suite(suite_name)
    frame = con.sql("select * from features.customer").df()
    problems = []
    for r in _run(
        suite_name, parts.table + parts.whole_column + parts.row, frame, index_column="customer_id"
    ):
        if not r.success:
            # How many rows, not which customers: the reason reaches alerts and readers' decisions.
            rows = len(r.result.get("unexpected_index_list") or [])
            problems.append(
                f"features.customer breaks rule {r.expectation_config.meta['rule']} "
                + (f"in {rows} row(s)" if rows else "as a whole")
            )
    figures = {"customers": len(frame), "broken_rules": problems}
    thresholds = {"rules": parts.rule_names}
    reason = (
        "; ".join(problems) if problems else f"features.customer passes all {len(parts.rule_names)} rules"
    )
    return Decision(QUALITY, "feature_suite", not problems, reason, figures, thresholds)


@task(name="validate-extract", task_run_name="validate-extract-{load.source_file}", cache_policy=NO_CACHE)
def validate_load_task(ctx: RunContext, load: loads.LoadResult) -> ValidationSummary:
    """Run the ledger suite on one load (never retried: validation is deterministic)."""
    with open_warehouse(ctx.warehouse, ctx.settings.scale) as con:
        return validate_load(con, load.load_id, ctx.settings)


@task(name="validate-features", task_run_name="validate-features-{ctx.period}", cache_policy=NO_CACHE)
def validate_features_task(ctx: RunContext) -> Decision:
    """Feature suite; a broken rule stops the run (recorded as a quality-gate decision)."""
    with open_warehouse(ctx.warehouse, ctx.settings.scale) as con:
        return enforce(con, ctx, validate_features(con))
