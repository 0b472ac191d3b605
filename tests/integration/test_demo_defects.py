"""`ledgerband demo --inject-defects`: the damage reaches the row rules and the gate acts on it as designed."""

from __future__ import annotations

import pytest

from ledgerband.tasks.core.context import RunContext
from ledgerband.tasks.demo.defects import inject
from ledgerband.tasks.demo.generator import generate
from ledgerband.tasks.gates.quarantine_share import quality_gate
from ledgerband.tasks.ingest.extracts import load_customers, load_extract
from ledgerband.tasks.ingest.manifest import read_manifest
from ledgerband.tasks.quality.validate import validate_load


def _damaged(tmp_path, settings, con, mode):
    files = generate(tmp_path / "landing", tmp_path / "answers.parquet", customers=200, months=1, seed=3)
    notes = inject(files, mode, seed=3)
    ctx = RunContext.create(files.periods[-1], settings=settings, run_id="run-1")
    load_customers(con, ctx, files.customers)
    load = load_extract(con, ctx, read_manifest(files.manifests[-1]))  # the re-issued manifest reconciles
    return notes, load, validate_load(con, load.load_id, settings)


def test_quarantine_mode_sets_aside_each_defect_by_rule_and_the_run_may_publish(tmp_path, settings, con):
    notes, load, v = _damaged(tmp_path, settings, con, "quarantine")
    assert len(notes) == 8
    for rule in (
        "text_control_characters",
        "amount_format",
        "currency_is_ledger_currency",
        "merchant_category_listed",
        "booking_date_format",
        "customer_id_in_reference",
        "purpose_code_listed",
        "balance_chain_continuous",
    ):
        assert v.rule_counts.get(rule, 0) >= 1, (rule, v.rule_counts)
    assert v.broken_chain_accounts == 1
    assert quality_gate([v], settings).passed  # a few bad records: quarantined, the month goes on


def test_stop_mode_damages_more_than_the_gate_allows(tmp_path, settings, con):
    notes, load, v = _damaged(tmp_path, settings, con, "stop")
    decision = quality_gate([v], settings)
    assert not decision.passed and "amount_format" in decision.reason
    assert v.rule_counts["amount_format"] == v.rows_quarantined == -(-load.rows_in_file // 40)


def test_unknown_mode_is_refused(tmp_path):
    from ledgerband.tasks.core.errors import LedgerbandError

    files = generate(tmp_path / "landing", tmp_path / "answers.parquet", customers=60, months=1, seed=3)
    with pytest.raises(LedgerbandError, match="--inject-defects must be one of quarantine, stop"):
        inject(files, "break-everything")
