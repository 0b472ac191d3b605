"""Ingest + validation on the hand-written fixture extracts (plain functions, no Prefect)."""

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

FIXTURES = Path(__file__).parents[1] / "fixtures"


def _copy(tmp_path: Path, name: str) -> Path:
    target = tmp_path / name
    shutil.copytree(FIXTURES / name, target)
    return target


def _ctx(run_id: str, settings: Settings | None = None) -> RunContext:
    return RunContext.create("2026-10", settings=settings or Settings(), run_id=run_id)


def _ingest(con, landing: Path, settings):
    """What the ingest and validate stages do: the customer file first (ledger rows are checked against
    it), then the month's extract."""
    load_customers(con, _ctx("run-1", settings), landing / "customers.csv")
    [manifest] = find_manifests(landing, Period(2026, 10))
    load = load_extract(con, _ctx("run-1", settings), manifest)
    return load, validate_load(con, load.load_id, settings)


def _settle(con, v, settings) -> None:
    """What the quality gate task does after deciding: accept or reject the load."""
    decision = quality_gate([v], settings)
    loads.settle(con, [v.load_id], decision.passed, decision.reason)


def test_good_extract_passes_every_rule(con, settings, tmp_path):
    load, v = _ingest(con, _copy(tmp_path, "ledger_good"), settings)
    assert (load.rows_in_file, load.rows_loaded, v.rows_quarantined) == (5, 5, 0)
    assert quality_gate([v], settings).passed


def test_bad_extract_quarantines_each_record_for_the_right_rules(con, settings, tmp_path):
    load, v = _ingest(con, _copy(tmp_path, "ledger_bad"), settings)
    rows = con.execute(
        "select source_line, failed_rules, reason, raw_record from quarantine.ledger_lines order by source_line"
    ).fetchall()
    by_line = {r[0]: r[1] for r in rows}
    assert by_line == {
        3: ["txn_id_unique"],  # T002 also appears on line 7: both copies are held back
        4: ["amount_format"],
        5: ["booking_date_in_period"],
        6: ["record_field_count"],
        # A malformed currency is not the ledger currency either: both rules name it.
        7: [
            "txn_id_unique",
            "direction_code",
            "currency_code",
            "currency_is_ledger_currency",
            "merchant_category_format",
            "merchant_category_listed",  # '54' is no ISO 18245 code either
        ],
        8: ["booking_date_is_iso_date", "amount_positive"],
    }
    reasons = {r[0]: r[2] for r in rows}
    assert reasons[4] == "line 4: amount_format (amount='900.5')"
    assert rows[3][3].endswith(",extra")  # the unsplittable record keeps its text
    # Reconciliation: every record of the file is either loaded or quarantined, none lost.
    staged = _stage(con, v)
    assert load.rows_in_file == 7 == staged + v.rows_quarantined


def _stage(con, v) -> int:
    con.execute("update ops.loads set status = 'accepted' where load_id = ?", [v.load_id])
    run_sql_file(con, "staging", "transactions")
    return con.execute("select count(*) from staging.transactions").fetchall()[0][0]


def test_bad_extract_fails_the_quality_gate_and_is_rejected(con, settings, tmp_path):
    _, v = _ingest(con, _copy(tmp_path, "ledger_bad"), settings)
    decision = quality_gate([v], settings)
    assert not decision.passed and "6 of 7 records" in decision.reason
    loads.settle(con, [v.load_id], decision.passed, decision.reason)
    assert con.execute("select status from ops.loads where dataset = 'ledger'").fetchall() == [("rejected",)]


def test_manifest_row_count_mismatch_stops_and_names_file_and_rule(con, settings, tmp_path):
    landing = _copy(tmp_path, "ledger_good")
    path = landing / "2026-10" / "ledger-2026-10.manifest.json"
    data = json.loads(path.read_text())
    data["row_count"] = 6
    path.write_text(json.dumps(data))
    [manifest] = find_manifests(landing, Period(2026, 10))
    with pytest.raises(
        GateStopped, match="ledger-2026-10.csv: rule manifest_row_count: file has 5 data records"
    ):
        load_extract(con, _ctx("run-1"), manifest)
    # Nothing is lost: the rows stay in raw under a rejected load, with the reason.
    assert con.execute("select status, rows_loaded from ops.loads").fetchall() == [("rejected", 5)]


def test_manifest_total_mismatch_stops(con, settings, tmp_path):
    landing = _copy(tmp_path, "ledger_good")
    path = landing / "2026-10" / "ledger-2026-10.manifest.json"
    data = json.loads(path.read_text())
    data["debit_total"] = "958.10"
    path.write_text(json.dumps(data))
    [manifest] = find_manifests(landing, Period(2026, 10))
    with pytest.raises(GateStopped, match="rule manifest_debit_total: file sums to 958.09, .* says 958.10"):
        load_extract(con, _ctx("run-1"), manifest)


def test_file_changed_after_its_manifest_is_refused(con, tmp_path):
    landing = _copy(tmp_path, "ledger_good")
    extract = landing / "2026-10" / "ledger-2026-10.csv"
    extract.write_text(extract.read_text().replace("45.10", "45.11"))
    [manifest] = find_manifests(landing, Period(2026, 10))
    with pytest.raises(ExtractError, match="SHA-256 .* differs .* changed or truncated"):
        load_extract(con, _ctx("run-1"), manifest)
    assert con.execute("select count(*) from raw.ledger_lines").fetchall()[0][0] == 0


def test_header_missing_a_column_is_stopped_by_the_table_rule(con, tmp_path):
    landing = _copy(tmp_path, "ledger_good")
    extract = landing / "2026-10" / "ledger-2026-10.csv"
    lines = extract.read_text().splitlines()
    lines = [",".join(line.split(",")[:-1]) for line in lines]  # drop merchant_region everywhere
    extract.write_text("\n".join(lines) + "\n")
    _rewrite_manifest(landing)
    [manifest] = find_manifests(landing, Period(2026, 10))
    with pytest.raises(GateStopped, match="line 1 \\(header\\) breaks rule columns_match_contract"):
        load_extract(con, _ctx("run-1"), manifest)


def _rewrite_manifest(landing: Path) -> None:
    import hashlib

    path = landing / "2026-10" / "ledger-2026-10.manifest.json"
    data = json.loads(path.read_text())
    data["sha256"] = hashlib.sha256((landing / "2026-10" / data["file"]).read_bytes()).hexdigest()
    path.write_text(json.dumps(data))


def test_reloading_an_accepted_file_loads_nothing(con, settings, tmp_path):
    landing = _copy(tmp_path, "ledger_good")
    load, v = _ingest(con, landing, settings)
    _settle(con, v, settings)
    [manifest] = find_manifests(landing, Period(2026, 10))
    again = load_extract(con, _ctx("run-2"), manifest)
    assert again.status == "skipped" and again.load_id == load.load_id
    assert con.execute("select count(*) from raw.ledger_lines").fetchall()[0][0] == 5


def test_retrying_a_rejected_file_replaces_the_earlier_attempt(con, settings, tmp_path):
    landing = _copy(tmp_path, "ledger_bad")
    _, v = _ingest(con, landing, settings)
    _settle(con, v, settings)
    _ingest(con, landing, settings)
    assert con.execute("select count(*) from raw.ledger_lines").fetchall()[0][0] == 6
    assert con.execute("select count(distinct load_id) from quarantine.ledger_lines").fetchall()[0][0] == 1


def test_customer_file_is_loaded_once(con, tmp_path):
    landing = _copy(tmp_path, "ledger_good")
    first = load_customers(con, _ctx("run-1"), landing / "customers.csv")
    second = load_customers(con, _ctx("run-2"), landing / "customers.csv")
    assert (first.status, second.status) == ("loaded", "skipped")
    assert con.execute("select count(*) from raw.customers").fetchall()[0][0] == 2


def test_feature_suite_passes_real_features_and_names_broken_rules(con, ledger_con_with_features):
    from ledgerband.tasks.quality.validate import validate_features

    assert validate_features(ledger_con_with_features).passed
    ledger_con_with_features.execute("update features.customer set debit_count = -1 where customer_id = 'C2'")
    ledger_con_with_features.execute(
        "insert into features.customer select * from features.customer where customer_id = 'C1'"
    )
    decision = validate_features(ledger_con_with_features)
    problems = decision.figures["broken_rules"]
    assert not decision.passed and decision.check == "feature_suite"
    assert "features.customer breaks rule one_row_per_customer in 2 row(s)" in problems
    assert "features.customer breaks rule debit_count_not_negative in 1 row(s)" in problems
    assert not any("C1" in p or "C2" in p for p in problems)  # no customer named in a decision


@pytest.fixture
def ledger_con_with_features(con, settings, tmp_path):
    from ledgerband.tasks.ingest.extracts import load_customers
    from ledgerband.tasks.layers.build import build_features

    landing = _copy(tmp_path, "ledger_good")
    _, v = _ingest(con, landing, settings)
    _settle(con, v, settings)
    load_customers(con, _ctx("run-1"), landing / "customers.csv")
    build_features(
        con,
        _ctx("run-1", Settings(home=tmp_path, features={"window_months": 1}, payroll={"lookback_months": 1})),
    )
    return con


def test_a_customer_file_sent_again_becomes_current_again(con, tmp_path):
    first, second = tmp_path / "a.csv", tmp_path / "b.csv"
    first.write_text(
        "customer_id,birth_date,sex,home_region,opened_date\nC1,1980-01-01,F,North Reach,2015-01-01\n"
    )
    second.write_text(
        "customer_id,birth_date,sex,home_region,opened_date\nC1,1980-01-01,F,South Reach,2015-01-01\n"
    )
    for path in (first, second, first):  # A, then B, then A again
        load_customers(con, _ctx("run"), path)
        run_sql_file(con, "staging", "customers")
    assert con.execute("select home_region from staging.customers").fetchall() == [("North Reach",)]
    assert con.execute("select count(*) from raw.customers").fetchall()[0][0] == 2  # A was not loaded twice


def test_a_header_name_with_a_space_stops_at_the_contract_rule_naming_it(con, tmp_path):
    landing = _copy(tmp_path, "ledger_good")
    extract = landing / "2026-10" / "ledger-2026-10.csv"
    text = extract.read_text()
    extract.write_text(text.replace("txn_id,account_id", "txn_id, account_id", 1))
    _rewrite_manifest(landing)
    [manifest] = find_manifests(landing, Period(2026, 10))
    with pytest.raises(GateStopped, match="columns_match_contract: .*' account_id'"):
        load_extract(con, _ctx("run-1"), manifest)


def test_a_booking_sent_again_in_a_later_file_is_quarantined_not_dropped(con, settings, tmp_path):
    import hashlib

    landing = _copy(tmp_path, "ledger_good")
    _, v = _ingest(con, landing, settings)
    _settle(con, v, settings)
    folder = landing / "2026-10"
    header = (folder / "ledger-2026-10.csv").read_text().splitlines()[0]
    late = folder / "ledger-2026-10-late.csv"
    late.write_text(
        header + "\n"
        "T001,A1,C1,2026-10-01,2600.00,CRDT,EUR,2700.00,PMNT/RCDT/SALA,SALA,EMP-1,,\n"  # T001 again, new amount
        "T100,A2,C2,2026-10-20,20.00,DBIT,EUR,367.01,PMNT/CCRD/POSD,,MER-3,5812,South Reach\n"
    )
    (folder / "ledger-2026-10-late.manifest.json").write_text(
        json.dumps(
            {
                "period": "2026-10",
                "institution": "Fixture Savings",
                "file": late.name,
                "sha256": hashlib.sha256(late.read_bytes()).hexdigest(),
                "row_count": 2,
                "credit_total": "2600.00",
                "debit_total": "20.00",
            }
        )
    )
    [manifest] = [m for m in find_manifests(landing, Period(2026, 10)) if m.file == late.name]
    load = load_extract(con, _ctx("run-2"), manifest)
    second = validate_load(con, load.load_id, settings)
    assert second.rule_counts == {"txn_id_not_loaded_before": 1}
    assert con.execute(
        "select source_line, failed_rules from quarantine.ledger_lines where load_id = ?", [load.load_id]
    ).fetchall() == [(2, ["txn_id_not_loaded_before"])]


def test_a_file_left_unsettled_by_a_stopped_run_does_not_poison_its_correction(con, settings, tmp_path):
    landing = _copy(tmp_path, "ledger_good")
    _ingest(con, landing, settings)  # run-1 loads and validates, then stops before its gate settles the load
    extract = landing / "2026-10" / "ledger-2026-10.csv"
    extract.write_text(extract.read_text().replace("MER-1", "MER-7"))  # the sender corrects a counterparty
    _rewrite_manifest(landing)
    [manifest] = find_manifests(landing, Period(2026, 10))
    load = load_extract(con, _ctx("run-2"), manifest)
    v = validate_load(con, load.load_id, settings)
    assert v.rows_quarantined == 0, v.examples


def _reissue(folder: Path, lines: list[str]) -> None:
    """Write the month's extract with these lines and re-sign its manifest, as a sender re-issuing it would."""
    import hashlib

    extract = folder / "ledger-2026-10.csv"
    extract.write_text("\n".join(lines) + "\n")
    manifest_path = folder / "ledger-2026-10.manifest.json"
    manifest = json.loads(manifest_path.read_text())
    manifest["sha256"] = hashlib.sha256(extract.read_bytes()).hexdigest()
    manifest_path.write_text(json.dumps(manifest))


def test_control_characters_and_overlong_text_are_quarantined_by_name(con, settings, tmp_path):
    # A NUL byte (and any C0 control character) inside a field, or a field longer than
    # quality.max_field_length, quarantines the record with the rule and the field named; others load.
    landing = _copy(tmp_path, "ledger_good")
    folder = landing / "2026-10"
    lines = (folder / "ledger-2026-10.csv").read_text().splitlines()
    fields = lines[2].split(",")
    fields[10] = "MER-\x001"  # counterparty_id with a NUL byte
    lines[2] = ",".join(fields)
    fields = lines[3].split(",")
    fields[12] = "R" * 200  # merchant_region far too long
    lines[3] = ",".join(fields)
    _reissue(folder, lines)
    _, v = _ingest(con, landing, settings)
    assert v.rule_counts == {"text_control_characters": 1, "text_field_too_long": 1}
    reasons = dict(
        con.execute("select source_line, reason from quarantine.ledger_lines order by 1").fetchall()
    )
    assert reasons[3] == "line 3: text_control_characters (counterparty_id='MER-\\x001')"
    assert reasons[4].startswith("line 4: text_field_too_long (merchant_region='RRRR")


def test_a_booking_in_another_currency_is_quarantined(con, settings, tmp_path):
    # Amounts in another currency would be summed as the same money. The ledger currency is an ISO 4217
    # code (checked against pycountry's list when settings load).
    landing = _copy(tmp_path, "ledger_good")
    folder = landing / "2026-10"
    lines = (folder / "ledger-2026-10.csv").read_text().splitlines()
    header = lines[0].split(",")
    fields = lines[2].split(",")
    fields[header.index("currency")] = "USD"
    lines[2] = ",".join(fields)
    _reissue(folder, lines)
    _, v = _ingest(con, landing, settings)
    assert v.rule_counts == {"currency_is_ledger_currency": 1}
    assert con.execute("select reason from quarantine.ledger_lines").fetchall() == [
        ("line 3: currency_is_ledger_currency (currency='USD')",)
    ]


def test_a_ledger_currency_outside_iso_4217_is_a_configuration_error():
    # Source: ISO 4217 code list as shipped by pycountry (EUR is listed; EUX is not a currency).
    from pydantic import ValidationError

    assert Settings(bands={"currency": "EUR"}).bands.currency == "EUR"
    with pytest.raises(ValidationError, match="'EUX' is not an ISO 4217 currency code"):
        Settings(bands={"currency": "EUX"})


@pytest.mark.parametrize("engine", ["gx", "duckdb"])
def test_gx_results_are_kept_per_rule_and_rendered_offline(con, settings, tmp_path, engine):
    # The kept results are in GX's form (expectation_config, success, result), merged over chunks when
    # GX evaluates; their counts must agree with what was quarantined, rule by rule.
    from ledgerband.tasks.quality.validate import read_suite
    from ledgerband.tasks.report import validation_page

    # Several chunks for 6 records (GX); one pass (DuckDB).
    small = Settings(home=tmp_path / "state", quality={"chunk_rows": 2, "engine": engine})
    _, v = _ingest(con, _copy(tmp_path, "ledger_bad"), small)
    parts = read_suite("ledger_lines")
    by_rule = {r["expectation_config"]["meta"]["rule"]: r for r in v.results}
    assert set(by_rule) == {e["meta"]["rule"] for e in parts.whole_column + parts.row}
    assert by_rule["amount_format"]["chunks"] == (3 if engine == "gx" else 1)
    assert by_rule["amount_format"].get("evaluated_by") == (None if engine == "gx" else "duckdb")
    for rule, result in by_rule.items():
        assert result["result"]["element_count"] == 6
        assert result["result"]["unexpected_count"] == v.rule_counts.get(rule, 0), rule
        assert result["success"] == (rule not in v.rule_counts)
    # Line numbers only: a record's values stay in the warehouse.
    assert by_rule["amount_format"]["result"]["partial_unexpected_index_list"] == [{"source_line": 4}]
    page = validation_page.keep(_ctx("run-1", small), [v])
    doc = json.loads(page.with_name("run-1.validation.json").read_text())
    assert doc["extracts"][0]["results"] == json.loads(json.dumps(v.results))
    html = page.read_text()
    assert "amount_format" in html and "900.5" not in html and "<script" not in html
    assert "ISO 18245" in html and "ExternalPurpose1Code" in html  # the code lists' versions are shown


def _source_manifest(folder: Path, file: str, source: str | None, lines: list[str]) -> None:
    from ledgerband.tasks.ingest.manifest import sender_figures

    path = folder / file
    path.write_text("\n".join(lines) + "\n")
    body = {
        "period": "2026-10",
        "institution": "Fixture Savings",
        "file": file,
        **sender_figures(path.read_bytes()),
    }
    if source:
        body["source"] = source
    (folder / file.replace(".csv", ".manifest.json")).write_text(json.dumps(body))


def test_a_month_from_several_source_systems_is_complete_only_when_each_has_arrived(con, settings, tmp_path):
    landing = _copy(tmp_path, "ledger_good")
    folder = landing / "2026-10"
    lines = (folder / "ledger-2026-10.csv").read_text().splitlines()
    for old in folder.iterdir():
        old.unlink()
    expected = ["current_accounts", "savings"]
    # Account A1 is kept by one system, A2 by the other: each file holds whole accounts.
    _source_manifest(folder, "current-2026-10.csv", "current_accounts", [lines[0], *lines[1:4]])
    with pytest.raises(
        ExtractError, match=r"period incomplete, no extract yet from source\(s\) \['savings'\]"
    ):
        find_manifests(landing, Period(2026, 10), expected)
    _source_manifest(folder, "branch-2026-10.csv", "branch_ledger", [lines[0], lines[4]])
    with pytest.raises(
        ExtractError, match="branch-2026-10.manifest.json: source 'branch_ledger' is not one of"
    ):
        find_manifests(landing, Period(2026, 10), expected)
    (folder / "branch-2026-10.csv").unlink()
    (folder / "branch-2026-10.manifest.json").unlink()
    _source_manifest(folder, "savings-2026-10.csv", "savings", [lines[0], lines[4], lines[5]])
    manifests = find_manifests(landing, Period(2026, 10), expected)
    assert sorted(m.source for m in manifests) == expected
    load_customers(con, _ctx("run-1"), landing / "customers.csv")
    summaries = [validate_load(con, load_extract(con, _ctx("run-1"), m).load_id, settings) for m in manifests]
    assert [s.rows_quarantined for s in summaries] == [0, 0]
    assert sum(s.rows_in_file for s in summaries) == 5
    # Without the setting, any number of extracts is a month (each with its manifest).
    assert len(find_manifests(landing, Period(2026, 10))) == 2


def test_hostile_files_are_refused_before_they_are_read(con, settings, tmp_path):
    import os

    from ledgerband.tasks.ingest.records import read_records

    # A header of 100,000 columns, and a "header" with no line break at all: refused from line 1 alone.
    wide = tmp_path / "wide.csv"
    wide.write_text(",".join(f"c{i}" for i in range(100_000)) + "\n1\n")
    with pytest.raises(ExtractError, match="wide.csv: line 1 \\(header\\) is longer than 65536 bytes"):
        read_records(wide)
    many = tmp_path / "many.csv"
    many.write_text(",".join("c" for _ in range(1000)) + "\n")
    with pytest.raises(ExtractError, match="many.csv: line 1 \\(header\\) has 1000 columns, more than 256"):
        read_records(many)

    # A file far larger than its manifest's row count allows is refused before it is hashed or parsed.
    landing = _copy(tmp_path, "ledger_good")
    extract = landing / "2026-10" / "ledger-2026-10.csv"
    with extract.open("a") as f:
        f.write("x" * 500_000 + "\n")
    _rewrite_manifest(landing)
    [manifest] = find_manifests(landing, Period(2026, 10))
    with pytest.raises(ExtractError, match="more than 5 records can take"):
        load_extract(con, _ctx("run-1"), manifest)

    # A file reached through a symbolic link out of the landing folder is not read.
    landing = _copy(tmp_path / "second", "ledger_good")
    outside = tmp_path / "elsewhere.csv"
    extract = landing / "2026-10" / "ledger-2026-10.csv"
    outside.write_bytes(extract.read_bytes())
    extract.unlink()
    os.symlink(outside, extract)
    with pytest.raises(ExtractError, match="outside the landing folder"):
        find_manifests(landing, Period(2026, 10))

    # So is a customer reference file that is a link to a file elsewhere.
    customers = landing / "customers.csv"
    (tmp_path / "customers-elsewhere.csv").write_bytes(customers.read_bytes())
    customers.unlink()
    os.symlink(tmp_path / "customers-elsewhere.csv", customers)
    with pytest.raises(ExtractError, match="customers.csv: resolves to .* outside the landing folder"):
        load_customers(
            con, RunContext.create("2026-10", landing, settings=Settings(), run_id="run-1"), customers
        )
