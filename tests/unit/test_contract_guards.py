"""Guards on things declared twice by necessity: the extract's columns (code and suite) and the catalogue
(its builder and its folders). Each fails when one side changes without the other."""

from __future__ import annotations

import ast
import json
from importlib import resources
from pathlib import Path

from ledgerband.tasks.ingest.extract_contract import LEDGER_COLUMNS

CATALOGUE = Path(__file__).parents[1] / "fixtures" / "bad"


def _suite_column_set() -> list[str]:
    suite = json.loads((resources.files("ledgerband.expectations") / "ledger_lines.json").read_text())
    [rule] = [e for e in suite["expectations"] if e["type"] == "expect_table_columns_to_match_set"]
    assert rule["kwargs"]["exact_match"] is True
    return rule["kwargs"]["column_set"]


def test_the_suite_checks_headers_against_exactly_the_contract_columns():
    # ingest reads LEDGER_COLUMNS; the header rule is the suite's column set: one list in two places.
    assert sorted(_suite_column_set()) == sorted(LEDGER_COLUMNS)
    assert len(set(LEDGER_COLUMNS)) == len(LEDGER_COLUMNS)


def _cases_in_builder(function: str = "case") -> list[str]:
    """The first argument of every `<function>("name", ...)` call in tests/fixtures/bad/build.py."""
    tree = ast.parse((CATALOGUE / "build.py").read_text())
    return [
        node.args[0].value
        for node in ast.walk(tree)
        if isinstance(node, ast.Call)
        and isinstance(node.func, ast.Name)
        and node.func.id == function
        and node.args
        and isinstance(node.args[0], ast.Constant)
    ]


def test_every_case_the_builder_writes_has_its_folder_and_no_folder_is_stray():
    built = _cases_in_builder()
    folders = sorted(p.name for p in CATALOGUE.iterdir() if (p / "case.json").is_file())
    assert len(built) == len(set(built)), "two cases share a name"
    assert sorted(built) == folders, (
        f"missing folders: {sorted(set(built) - set(folders))}; stray folders: {sorted(set(folders) - set(built))}"
        " (run `python tests/fixtures/bad/build.py` and commit what it writes)"
    )
    # 45 cases on 2026-12-05: the catalogue only grows (a case removed on purpose lowers this number)
    assert len(folders) >= 45


def test_every_verified_incomes_case_the_builder_writes_has_its_folder_and_no_folder_is_stray():
    built = _cases_in_builder("verified_case")
    root = CATALOGUE / "verified_incomes"
    folders = sorted(p.name for p in root.iterdir() if (p / "case.json").is_file())
    assert len(built) == len(set(built)), "two verified incomes cases share a name"
    assert sorted(built) == folders, (
        f"missing folders: {sorted(set(built) - set(folders))}; stray folders: {sorted(set(folders) - set(built))}"
        " (run `python tests/fixtures/bad/build.py` and commit what it writes)"
    )
    # 20 cases on 2026-12-05: the catalogue only grows (a case removed on purpose lowers this number)
    assert len(folders) >= 20


def test_the_verified_incomes_suite_checks_headers_against_exactly_the_contract_columns():
    from ledgerband.tasks.ingest.extract_contract import VERIFIED_INCOME_COLUMNS

    suite = json.loads((resources.files("ledgerband.expectations") / "verified_incomes.json").read_text())
    [rule] = [e for e in suite["expectations"] if e["type"] == "expect_table_columns_to_match_set"]
    assert rule["kwargs"]["exact_match"] is True
    assert sorted(rule["kwargs"]["column_set"]) == sorted(VERIFIED_INCOME_COLUMNS)
