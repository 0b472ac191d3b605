"""The bad-input catalogue: each folder in tests/fixtures/bad/ holds one defect and says what must happen.

For every case: a stop names the file and the rule; a quarantine names file, line and rule for exactly
the damaged records; and no record is lost (records read = records staged + records quarantined). The
defects are the ways extracts go wrong in the trade (encodings, delimiters, truncation, re-sent files,
manifest disagreements, code lists: ISO 4217, ISO 18245, ISO 20022); the cases are built by
tests/fixtures/bad/build.py from one correct ledger whose balances chain.
"""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import pytest

from ledgerband.tasks.core.context import RunContext
from ledgerband.tasks.core.errors import ExtractError, GateStopped
from ledgerband.tasks.core.period import Period
from ledgerband.tasks.core.settings import Settings
from ledgerband.tasks.core.warehouse import run_sql_file
from ledgerband.tasks.gates.quarantine_share import quality_gate
from ledgerband.tasks.ingest import loads
from ledgerband.tasks.ingest.extracts import load_customers, load_extract
from ledgerband.tasks.ingest.manifest import find_manifests
from ledgerband.tasks.quality.validate import validate_load

CATALOGUE = Path(__file__).parents[1] / "fixtures" / "bad"
CASES = sorted(p.name for p in CATALOGUE.iterdir() if (p / "case.json").is_file())


def _month(con, landing: Path, period: Period, run_id: str, settings: Settings):
    """Ingest and validate one month as the flow does, and settle the load as the quality gate does."""
    ctx = RunContext.create(str(period), settings=settings, run_id=run_id)
    load_customers(con, ctx, landing / "customers.csv")
    [manifest] = find_manifests(landing, period)
    load = load_extract(con, ctx, manifest)
    if load.status == loads.SKIPPED:
        return load, None
    summary = validate_load(con, load.load_id, settings)
    decision = quality_gate([summary], settings)
    loads.settle(con, [load.load_id], decision.passed, decision.reason)
    return load, summary


@pytest.mark.parametrize("name", CASES)
def test_bad_input(name, con, tmp_path):
    case = json.loads((CATALOGUE / name / "case.json").read_text(encoding="utf-8"))
    landing = tmp_path / name
    shutil.copytree(CATALOGUE / name, landing)
    # The row-level outcome is what is tested here; the share limits (which stop a run whose extract is
    # mostly bad, as these five-record files are) are tested with the quality gate.
    settings = Settings(
        home=tmp_path / "state", quality={"max_quarantine_share": 1, "max_broken_chain_share": 1}
    )
    if case["month_before"]:
        _, before = _month(con, landing, Period(2026, 9), "run-0", settings)
        assert before.rows_quarantined == 0, before.examples
    october = Period(2026, 10)
    extract = "ledger-2026-10.csv"

    if case["outcome"] == "stop":
        with pytest.raises((ExtractError, GateStopped)) as caught:
            _month(con, landing, october, "run-1", settings)
        message = str(caught.value)
        for part in case["message"]:
            assert part in message, f"{name}: {part!r} not in {message!r}"
        # Nothing of a refused file reaches the tables the features read.
        assert con.execute(
            "select count(*) from ops.loads where dataset = 'ledger' and period = '2026-10' and status = 'accepted'"
        ).fetchall() == [(0,)]
        return

    if case["outcome"] == "skip":
        first, _ = _month(con, landing, october, "run-1", settings)
        again, _ = _month(con, landing, october, "run-2", settings)
        assert (again.status, again.load_id) == (loads.SKIPPED, first.load_id)
        assert con.execute("select count(*) from raw.ledger_lines").fetchall() == [(5,)]
        return

    load, summary = _month(con, landing, october, "run-1", settings)
    rows = con.execute(
        "select source_line, failed_rules, reason, source_file from quarantine.ledger_lines "
        "where load_id = ? order by source_line",
        [load.load_id],
    ).fetchall()
    expected = {int(k): sorted(v) for k, v in case.get("quarantined", {}).items()}
    assert {line: sorted(rules) for line, rules, _, _ in rows} == expected
    for line, rules, reason, source_file in rows:
        assert Path(source_file).name == extract  # the file …
        assert reason.startswith(f"line {line}: ")  # … the line …
        for rule in rules:
            assert rule in reason  # … and every rule broken
    reason = con.execute("select reason from ops.loads where load_id = ?", [load.load_id]).fetchall()[0][0]
    for part in case.get("load_reason", []):
        assert part in (reason or ""), f"{name}: {part!r} not in ops.loads.reason {reason!r}"
    # No record lost: every record read is staged or quarantined.
    run_sql_file(con, "staging", "transactions")
    staged = con.execute(
        "select count(*) from staging.transactions where load_id = ?", [load.load_id]
    ).fetchall()[0][0]
    assert load.rows_in_file == staged + summary.rows_quarantined
    for column, value in case.get("verbatim", {}).items():
        stored = [r[0] for r in con.execute(f"select {column} from staging.transactions").fetchall()]
        assert value in stored  # stored exactly as sent


def _outcome(con, load_id: str, settings: Settings) -> tuple:
    """What validation decided about a load: its quarantined records (line, rules, reason) and, per rule,
    GX's result figures (success, counts, the first broken lines)."""
    summary = validate_load(con, load_id, settings)
    quarantined = con.execute(
        "select source_line, failed_rules, reason from quarantine.ledger_lines where load_id = ? order by all",
        [load_id],
    ).fetchall()
    results = {
        r["expectation_config"]["meta"]["rule"]: (
            r["success"],
            {k: r["result"].get(k) for k in ("element_count", "missing_count", "unexpected_count")},
            round(r["result"]["unexpected_percent"], 9),
            r["result"]["partial_unexpected_index_list"],
        )
        for r in summary.results
    }
    return quarantined, results, summary.rule_counts, summary.broken_chain_accounts


# The cases whose October extract is loaded and validated (the others are refused, or skipped as a
# resent file, before any rule is evaluated).
VALIDATED = [
    name
    for name in CASES
    if json.loads((CATALOGUE / name / "case.json").read_text(encoding="utf-8"))["outcome"]
    in ("quarantine", "load")
]


@pytest.mark.parametrize("name", VALIDATED)
def test_duckdb_evaluates_every_rule_as_gx_does(name, con, tmp_path):
    """quality.engine = "duckdb" (the rules as SQL predicates, tasks/quality/pushdown.py) against "gx" (GX Core's
    own evaluation on pandas, the reference): the same records quarantined with the same rules and
    reasons, and the same result figures for every rule, on every case of the catalogue that reaches
    validation."""
    assert len(VALIDATED) >= 25, VALIDATED
    landing = tmp_path / name
    shutil.copytree(CATALOGUE / name, landing)
    case = json.loads((CATALOGUE / name / "case.json").read_text(encoding="utf-8"))
    limits = {"max_quarantine_share": 1, "max_broken_chain_share": 1}
    settings = Settings(home=tmp_path / "state", quality=limits)
    if case["month_before"]:
        _month(con, landing, Period(2026, 9), "run-0", settings)
    ctx = RunContext.create("2026-10", settings=settings, run_id="run-1")
    load_customers(con, ctx, landing / "customers.csv")
    [manifest] = find_manifests(landing, Period(2026, 10))
    load = load_extract(con, ctx, manifest)
    assert load.status == loads.LOADED
    by_duckdb = _outcome(
        con, load.load_id, Settings(home=settings.home, quality={**limits, "engine": "duckdb"})
    )
    by_gx = _outcome(con, load.load_id, Settings(home=settings.home, quality={**limits, "engine": "gx"}))
    assert by_duckdb == by_gx


def test_a_customer_file_with_a_short_record_that_is_not_utf8_is_refused_by_its_line(con, tmp_path):
    """The customer file is refused on any malformed record (it is reference data, loaded whole); a
    record both a field short and holding a Latin-1 byte (0xf6; not UTF-8 by RFC 3629) is named by its
    line and field count like any other, its values kept out of the message."""
    from ledgerband.tasks.core.errors import ExtractError

    path = tmp_path / "customers.csv"
    text = CATALOGUE.joinpath("bom", "customers.csv").read_text(encoding="utf-8")
    header, first, second = text.splitlines()[:3]
    short = ",".join(second.split(",")[:-1]).replace("South", "S\xf6uth")
    path.write_bytes(f"{header}\n{first}\n{short}\n".encode("latin-1"))
    ctx = RunContext.create("2026-10", settings=Settings(home=tmp_path / "state"), run_id="run-1")
    with pytest.raises(ExtractError, match=r"customers.csv: line 3 has 4 fields, the header has 5") as e:
        load_customers(con, ctx, path)
    assert "S\\xf6uth" not in str(e.value) and "South" not in str(e.value)


# --- the optional verified incomes file (tests/fixtures/bad/verified_incomes/) ---------------------------
VERIFIED_CATALOGUE = CATALOGUE / "verified_incomes"
VERIFIED_CASES = sorted(p.name for p in VERIFIED_CATALOGUE.iterdir() if (p / "case.json").is_file())


def _verified(con, landing: Path, settings: Settings, run_id: str = "run-1"):
    """Ingest the customer file and the verified incomes file for October 2026 as the flow does, check it
    and build staging.verified_incomes; returns the load and the check's summary."""
    from ledgerband.tasks.ingest.verified import load_verified_incomes
    from ledgerband.tasks.quality.verified import validate_verified

    ctx = RunContext.create("2026-10", landing, settings=settings, run_id=run_id)
    load_customers(con, ctx, landing / "customers.csv")
    load = load_verified_incomes(con, ctx)
    summary = validate_verified(con, ctx)
    run_sql_file(con, "staging", "verified_incomes", ctx.layer_params())
    return load, summary


@pytest.mark.parametrize("name", VERIFIED_CASES)
def test_bad_verified_incomes(name, con, tmp_path):
    """A refused file names the file and the rule and leaves nothing to stage; a read file has exactly the
    listed lines quarantined for exactly the listed rules (reason: line and rules, never a value), every
    other record staged, and no record lost (read = staged + quarantined)."""
    assert len(VERIFIED_CASES) >= 20, VERIFIED_CASES
    case = json.loads((VERIFIED_CATALOGUE / name / "case.json").read_text(encoding="utf-8"))
    landing = tmp_path / name
    shutil.copytree(VERIFIED_CATALOGUE / name, landing)
    settings = Settings(home=tmp_path / "state")
    data = (landing / "verified_incomes.csv").read_bytes()

    if case["outcome"] == "stop":
        with pytest.raises(ExtractError) as caught:
            _verified(con, landing, settings)
        message = str(caught.value)
        for part in case["message"]:
            assert part in message, f"{name}: {part!r} not in {message!r}"
        assert con.execute("select count(*) from raw.verified_incomes").fetchall() == [(0,)]
        assert con.execute(
            "select count(*) from ops.loads where dataset = 'verified_incomes'"
        ).fetchall() == [(0,)]
        return

    load, summary = _verified(con, landing, settings)
    rows = con.execute(
        "select source_line, failed_rules, reason, source_file from quarantine.verified_incomes "
        "where run_id = 'run-1' order by source_line"
    ).fetchall()
    expected = {int(k): sorted(v) for k, v in case.get("quarantined", {}).items()}
    assert {line: sorted(rules) for line, rules, _, _ in rows} == expected
    records = [r for r in data.decode("utf-8-sig").splitlines()[1:] if r]
    values = {v for r in records for v in r.split(",")[:4] if v}
    for line, rules, reason, source_file in rows:
        assert Path(source_file).name == "verified_incomes.csv"  # the file …
        assert reason.startswith(f"line {line}: ")  # … the line …
        for rule in rules:
            assert rule in reason  # … and every rule broken
        assert not [v for v in values if v in reason.split(" ")], reason  # never a value
    staged = con.execute("select count(*) from staging.verified_incomes").fetchall()[0][0]
    assert load.rows_in_file == len(records) == staged + summary.rows_quarantined
    assert summary.rows_quarantined == len(expected)
    assert con.execute(
        "select rows_in_file, rows_accepted, rows_quarantined from ops.verified_income_runs where run_id = 'run-1'"
    ).fetchall() == [(len(records), staged, len(expected))]


@pytest.mark.parametrize(
    "name",
    [
        n
        for n in VERIFIED_CASES
        if json.loads((VERIFIED_CATALOGUE / n / "case.json").read_text(encoding="utf-8"))["outcome"] != "stop"
    ],
)
def test_duckdb_evaluates_every_verified_incomes_rule_as_gx_does(name, con, tmp_path):
    """The verified incomes suite by DuckDB predicates and by GX (the reference): same records, same rules,
    same reasons, same counts."""
    landing = tmp_path / name
    shutil.copytree(VERIFIED_CATALOGUE / name, landing)
    outcomes = []
    for engine in ("duckdb", "gx"):
        settings = Settings(home=tmp_path / "state", quality={"engine": engine})
        _, summary = _verified(con, landing, settings, run_id=f"run-{engine}")
        quarantined = con.execute(
            "select source_line, failed_rules, reason from quarantine.verified_incomes where run_id = ? "
            "order by source_line",
            [f"run-{engine}"],
        ).fetchall()
        outcomes.append((quarantined, summary.rule_counts, summary.rows_quarantined))
    assert outcomes[0] == outcomes[1]
