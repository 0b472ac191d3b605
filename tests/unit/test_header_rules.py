"""Header rules read without GX (tasks/pushdown.header_result) against GX Core's own evaluation.

Reference: GX Core 1.x, pandas engine (`validate._run` builds the suite and validates an empty frame with
the file's columns, exactly as ingest did before the push-down). Every header shape a file can have,
every argument form the two rule types take: same success, same result.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest

from ledgerband.tasks.ingest.extract_contract import LEDGER_COLUMNS
from ledgerband.tasks.quality import pushdown
from ledgerband.tasks.quality.validate import _run, extract_contract_decision

CONTRACT = list(LEDGER_COLUMNS)
HEADERS = {
    "contract": CONTRACT,
    "reordered": list(reversed(CONTRACT)),
    "one_missing": CONTRACT[:-1],
    "one_extra": [*CONTRACT, "branch_code"],
    "renamed": ["transaction_id", *CONTRACT[1:]],
    "upper_case": [c.upper() for c in CONTRACT],
    "spaces_kept": [" txn_id", *CONTRACT[1:]],
    "bom_left_in": ["\ufefftxn_id", *CONTRACT[1:]],
    "single_column": ["txn_id;account_id;customer_id"],
    "nothing_in_common": ["a", "b"],
}
RULES = [
    {"type": "expect_table_columns_to_match_set", "kwargs": {"column_set": CONTRACT}},
    {"type": "expect_table_columns_to_match_set", "kwargs": {"column_set": CONTRACT, "exact_match": True}},
    {"type": "expect_table_columns_to_match_set", "kwargs": {"column_set": CONTRACT, "exact_match": False}},
    {"type": "expect_table_column_count_to_equal", "kwargs": {"value": len(CONTRACT)}},
    {"type": "expect_table_column_count_to_equal", "kwargs": {"value": 2}},
]


@pytest.mark.parametrize("header", HEADERS.values(), ids=list(HEADERS))
def test_header_rules_read_as_gx_reads_them(header):
    rules = [{**r, "meta": {"rule": f"r{i}"}} for i, r in enumerate(RULES)]
    frame = pd.DataFrame({c: pd.Series([], dtype="str") for c in header})
    by_gx = {r.expectation_config.meta["rule"]: r for r in _run("header", rules, frame)}
    assert len(by_gx) == len(rules)
    for rule in rules:
        local = pushdown.header_result(rule, header)
        reference = by_gx[rule["meta"]["rule"]]
        assert local is not None, rule
        assert local["success"] == reference.success, (rule, header)
        assert local["result"] == reference.result, (rule, header)


def test_other_header_rules_are_left_to_gx():
    assert (
        pushdown.header_result({"type": "expect_table_columns_to_match_ordered_list", "kwargs": {}}, [])
        is None
    )
    row_condition = {
        "type": "expect_table_column_count_to_equal",
        "kwargs": {"value": 3, "row_condition": "x"},
    }
    assert pushdown.header_result(row_condition, ["a"]) is None


@pytest.mark.parametrize("header", HEADERS.values(), ids=list(HEADERS))
def test_contract_decision_is_the_same_on_either_engine(header):
    source = Path("ledger-2026-10.csv")
    local = extract_contract_decision(header, source=source, engine="duckdb")
    by_gx = extract_contract_decision(header, source=source, engine="gx")
    assert (local.passed, local.reason, local.figures) == (by_gx.passed, by_gx.reason, by_gx.figures)
    assert local.passed == (header == HEADERS["contract"] or header == HEADERS["reordered"])


def test_checking_a_header_does_not_import_gx():
    """The point of the push-down: ingest's header check leaves GX (about 6 s to import) unloaded."""
    code = (
        "import sys\n"
        "from pathlib import Path\n"
        "from ledgerband.tasks.ingest.extracts import load_extract\n"
        "from ledgerband.tasks.ingest.extract_contract import LEDGER_COLUMNS\n"
        "from ledgerband.tasks.quality.validate import extract_contract_decision\n"
        "assert extract_contract_decision(list(LEDGER_COLUMNS), source=Path('x.csv')).passed\n"
        "print(any(m.split('.')[0] == 'great_expectations' for m in sys.modules))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False", out.stderr
