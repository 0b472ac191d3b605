"""The whole monthly flow under Prefect on a small generated bank: publish, rerun, withhold, stop."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import duckdb
import pytest

from ledgerband.tasks.core.errors import GateStopped

CUSTOMERS = 400


@pytest.fixture(scope="module")
def home(tmp_path_factory, prefect_api):
    import logging

    home = tmp_path_factory.mktemp("flow-home")
    # The runs' INFO lines reach the API, as in an operator's shell (the log scan below reads them).
    run_loggers = [logging.getLogger(f"prefect.{name}") for name in ("flow_runs", "task_runs")]
    levels = [logger.level for logger in run_loggers]
    for logger in run_loggers:
        logger.setLevel(logging.INFO)
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("LEDGERBAND_HOME", str(home))
        yield home
    for logger, level in zip(run_loggers, levels, strict=True):
        logger.setLevel(level)


@pytest.fixture(scope="module")
def demo(home):
    from ledgerband.tasks.core.settings import get_settings
    from ledgerband.tasks.demo.generator import generate

    get_settings.cache_clear()
    s = get_settings()
    files = generate(
        s.demo_landing_dir, s.demo_answers_path, customers=CUSTOMERS, months=4, end_period="2026-10", seed=11
    )
    _spoil_last_month(files)
    return files


def _spoil_last_month(files) -> None:
    """Append two bad records to the last extract (well under the 1% quarantine limit) and re-issue its
    manifest, as a sender would: a booking from the previous file sent again, and an unreadable amount."""
    import hashlib

    last, previous = files.extracts[-1], files.extracts[-2]
    resent = previous.read_text().splitlines()[1]
    fields = resent.split(",")
    bad_amount = ",".join([fields[0].replace("CMS", "BAD"), *fields[1:4], "1O.00", *fields[5:]])  # letter O
    with last.open("a") as f:
        f.write(resent + "\n" + bad_amount + "\n")
    manifest = json.loads(files.manifests[-1].read_text())
    manifest["row_count"] += 2
    manifest["sha256"] = hashlib.sha256(last.read_bytes()).hexdigest()
    files.manifests[-1].write_text(json.dumps(manifest))


@pytest.fixture(scope="module")
def first_run(demo):
    from ledgerband.flows.monthly import monthly_run

    return monthly_run("2026-10", demo.landing_dir)


def _q(home: Path, query: str, params=None):
    con = duckdb.connect(str(home / "warehouse.duckdb"), read_only=True)
    try:
        return con.execute(query, params).fetchall()
    finally:
        con.close()


def test_a_month_publishes_one_band_row_per_customer(home, first_run):
    assert first_run.status == "published"
    assert _q(home, "select count(*), count(distinct customer_id) from published.income_bands") == [
        (CUSTOMERS, CUSTOMERS)
    ]
    # Published totals equal feature totals: every customer of the reference file is banded once.
    assert _q(home, "select sum(customer_count) from published.band_summary") == [(CUSTOMERS,)]
    sources = dict(_q(home, "select band_source, count(*) from published.income_bands group by all"))
    assert sources["observed_salary"] == _q(home, "select count(*) from features.customer_salary")[0][0]
    assert sources["model_estimate"] > 0
    # Pensions read from their credits are published as observed income, never as salary labels.
    assert (
        sources["observed_pension"]
        == _q(
            home,
            "select count(*) from features.customer_label where annual_pension is not null and annual_salary is null",
        )[0][0]
    )
    assert sources["observed_pension"] > 0


def test_model_estimates_carry_an_interval_and_band_confidence(home, first_run):
    rows = _q(
        home,
        "select band_source, count(*), count(estimate_low), count(band_confidence), "
        "bool_and(estimate_low <= annual_income_estimate and annual_income_estimate <= estimate_high), "
        "bool_and(annual_income_estimate % 1000 = 0), min(band_confidence), max(band_confidence) "
        "from published.income_bands group by all order by all",
    )
    by_source = {r[0]: r[1:] for r in rows}
    n, lows, confs, inside, rounded, lo_conf, hi_conf = by_source["model_estimate"]
    assert n == lows == confs and inside and rounded and 0 <= lo_conf <= hi_conf <= 1
    for observed in ("observed_salary", "observed_pension"):
        assert by_source[observed][1:3] == (0, 0)  # observed amounts carry no interval


def test_error_by_group_and_population_shift_are_kept_and_reported(home, first_run):
    attributes = {
        a
        for (a,) in _q(
            home, "select distinct attribute from ml.group_errors where run_id = ?", [first_run.run_id]
        )
    }
    assert attributes == {"sex", "age_band", "home_region", "observed_band"}
    # Every labelled customer in the comparison is counted once per attribute.
    per_attribute = _q(
        home,
        "select attribute, sum(customers) from ml.group_errors where run_id = ? group by all",
        [first_run.run_id],
    )
    assert len({total for _, total in per_attribute}) == 1
    features = _q(home, "select count(*) from ml.population_shift where run_id = ?", [first_run.run_id])[0][0]
    assert features == 7
    html = first_run.report.read_text()
    for heading in ("How sure the estimates are", "Error by group", "Population shift", "Learning curve"):
        assert heading in html


def test_every_stage_is_recorded_in_ops_runs(home, first_run):
    [(status, stages)] = _q(home, "select status, stages from ops.runs where run_id = ?", [first_run.run_id])
    stages = json.loads(stages)
    assert status == "published"
    assert [s["stage"] for s in stages] == [
        "ingest",
        "validate",
        "features",
        "label_gate",
        "train",
        "accuracy_gate",
        "drift_gate",
        "publish",
        "report",
        "reader_copy",
        "parquet",
    ]
    assert all(s["status"] == "ok" and s["seconds"] is not None for s in stages)


def test_rows_in_equal_rows_staged_plus_quarantined(home, first_run, demo):
    in_files = sum(json.loads(m.read_text())["row_count"] for m in demo.manifests)
    staged = _q(home, "select count(*) from staging.transactions")[0][0]
    rules = _q(home, "select failed_rules from quarantine.ledger_lines order by source_line")
    assert in_files == staged + len(rules) == demo.rows + 2
    assert rules == [
        (["txn_id_not_loaded_before", "booking_date_in_period"],),  # the resent booking (dated last month)
        (["booking_date_in_period", "amount_format"],),  # the unreadable amount (built from the same line)
    ]


def test_the_report_links_the_runs_validation_results(first_run):
    html = first_run.report.read_text()
    page = first_run.report.with_name(f"{first_run.run_id}.validation.html")
    assert f'href="{page.name}"' in html and page.is_file()
    results = json.loads(page.with_name(f"{first_run.run_id}.validation.json").read_text())
    assert [x["source_file"].split("/")[-1] for x in results["extracts"]] == [
        f"ledger-{m}.csv" for m in ("2026-07", "2026-08", "2026-09", "2026-10")
    ]
    last = {r["expectation_config"]["meta"]["rule"]: r for r in results["extracts"][-1]["results"]}
    assert last["amount_format"]["result"]["unexpected_count"] == 1  # the spoiled record


def test_readers_open_the_published_copy_while_the_warehouse_is_held(home, first_run):
    writer = duckdb.connect(str(home / "warehouse.duckdb"))  # a run in progress holds the file
    try:
        reader = duckdb.connect(str(first_run.published_path), read_only=True)
        assert reader.execute("select count(*) from income_bands").fetchall() == [(CUSTOMERS,)]
        reader.close()
    finally:
        writer.close()


def test_report_carries_the_cautions_and_the_model_comparison(first_run):
    html = first_run.report.read_text()
    # At least five pictures, inline (the page stays one offline file), each titled and explained.
    import re

    figures = re.findall(r'<figure class="plot" id="plot-([a-z_]+)">(.*?)</figure>', html, flags=re.S)
    assert len(figures) >= 5
    for key, body in figures:
        assert "<svg" in body and "How to read this:" in body, key
    for loads_from_network in ('src="http', "src='http", 'href="http', "url(http", "<script"):
        assert loads_from_network not in html
    assert "Internal reporting only" in html and "never replace verified income" in html
    assert "baseline_mean" in html and "linear_regression" in html and "decision_tree" in html
    assert "Published:" in html


def test_saved_model_reloads_and_reproduces_the_estimates(home, first_run):
    import numpy as np

    from ledgerband.tasks.modeling.train import load_champion, model_frame

    folder = home / "models" / "2026-10" / first_run.run_id
    assert sorted(p.name for p in folder.iterdir()) == ["model.skops", "model_card.json"]
    con = duckdb.connect(str(home / "warehouse.duckdb"), read_only=True)
    model, card = load_champion(con, home / "models", first_run.run_id)
    assert "sex" not in card["features"] and "age_years" not in card["features"]
    frame = model_frame(con)
    stored = dict(
        con.execute(
            "select customer_id, estimate from ml.predictions where run_id = ?", [first_run.run_id]
        ).fetchall()
    )
    con.close()
    again = np.clip(model.predict(frame[card["features"]]), 0, None)
    assert np.allclose(again, frame["customer_id"].map(stored).to_numpy())


def test_a_saved_model_changed_after_it_was_written_is_refused(home, first_run, tmp_path):
    """Only skops files this pipeline wrote are loaded: ml.model_runs keeps the file's SHA-256 (checked here
    with hashlib, the standard library's FIPS 180-4 implementation) and a changed file is never unpacked."""
    import hashlib

    from ledgerband.tasks.core.errors import ModelFileRefused
    from ledgerband.tasks.modeling.train import load_model

    saved = home / "models" / "2026-10" / first_run.run_id / "model.skops"
    [(recorded,)] = _q(
        home, "select model_sha256 from ml.model_runs where run_id = ? and is_champion", [first_run.run_id]
    )
    assert recorded == hashlib.sha256(saved.read_bytes()).hexdigest()
    assert _q(
        home,
        "select count(model_sha256) from ml.model_runs where run_id = ? and not is_champion",
        [first_run.run_id],
    ) == [(0,)]
    tampered = tmp_path / "model.skops"
    data = bytearray(saved.read_bytes())
    data[len(data) // 2] ^= 0x01  # one bit
    tampered.write_bytes(bytes(data))
    with pytest.raises(ModelFileRefused, match="differs from"):
        load_model(tampered, recorded)
    with pytest.raises(ModelFileRefused, match="no checksum"):
        load_model(saved, None)
    load_model(saved, recorded)  # the file as written loads


def test_rerun_loads_nothing_twice_and_publishes_a_new_snapshot(home, first_run, demo):
    from ledgerband.flows.monthly import monthly_run

    raw_before = _q(home, "select count(*) from raw.ledger_lines")[0][0]
    second = monthly_run("2026-10", demo.landing_dir)
    assert _q(home, "select count(*) from raw.ledger_lines")[0][0] == raw_before
    # four extracts, customers and verified incomes, once each
    assert _q(home, "select count(*) from ops.loads")[0][0] == 6
    # the verified incomes file, loaded once, is read again by the rerun and judged for its period
    assert _q(
        home,
        "select rows_in_file = rows_accepted + rows_quarantined, load_id = (select min(load_id) from ops.loads "
        "where dataset = 'verified_incomes') from ops.verified_income_runs where run_id = ?",
        [second.run_id],
    ) == [(True, True)]
    assert _q(home, "select run_id from published.snapshots where is_current") == [(second.run_id,)]
    assert _q(home, "select count(*) from published.income_bands")[0][0] == CUSTOMERS


def test_a_crashed_runs_committed_snapshot_is_replaced_by_its_reruns_identical_one(home, first_run, tmp_path):
    """A run killed after its publish committed left a whole snapshot and no record of finishing. Its rerun
    computes the same rows: they replace the crashed run's, so history holds the month once, as after one
    clean run. A finished run's snapshot, or a crashed run's that differs, stays (any rerun's does)."""
    import uuid

    from ledgerband.tasks.core.context import RunContext
    from ledgerband.tasks.core.settings import get_settings
    from ledgerband.tasks.publish.snapshot import publish_snapshot

    for suffix in ("", ".wal"):  # a copy: the module's warehouse stays as the other tests left it
        if (home / f"warehouse.duckdb{suffix}").exists():
            shutil.copy(home / f"warehouse.duckdb{suffix}", tmp_path / f"warehouse.duckdb{suffix}")
    con = duckdb.connect(str(tmp_path / "warehouse.duckdb"))
    [(old,)] = con.execute("select run_id from published.snapshots where is_current").fetchall()

    def history_rows(run_id):
        return con.execute(
            "select count(*) from published.income_bands_history where run_id = ?", [run_id]
        ).fetchall()[0][0]

    def republish(status, change=0.0):
        con.execute("update ops.runs set status = ? where run_id = ?", [status, old])
        new = str(uuid.uuid4())
        con.execute(
            "insert into ml.predictions by name select * replace ($new as run_id, "
            "income_value + case when customer_id = (select min(customer_id) from ml.predictions "
            "where run_id = $old) then $change else 0 end as income_value) "
            "from ml.predictions where run_id = $old",
            {"new": new, "old": old, "change": change},
        )
        publish_snapshot(con, RunContext.create("2026-10", settings=get_settings(), run_id=new), "v-test")
        return new

    try:
        snapshots = con.execute("select count(*) from published.snapshots").fetchall()[0][0]
        rows = history_rows(old)
        new = republish("crashed")
        assert history_rows(old) == 0 and history_rows(new) == rows
        assert con.execute("select count(*) from published.snapshots").fetchall()[0][0] == snapshots
        assert con.execute("select count(*) from published.snapshots where run_id = ?", [old]).fetchall() == [
            (0,)
        ]
        [(error,)] = con.execute("select error from ops.runs where run_id = ?", [old]).fetchall()
        assert "replaced by it" in error and new in error

        old = new
        kept = republish("published")  # a finished run's snapshot is never removed
        assert history_rows(old) == rows and history_rows(kept) == rows

        old = kept
        differing = republish("crashed", change=1000.0)  # one customer's amount differs: a different answer
        assert history_rows(old) == rows and history_rows(differing) == rows
        assert con.execute("select count(*) from published.snapshots").fetchall()[0][0] == snapshots + 2
    finally:
        con.close()


def test_withheld_run_keeps_the_previous_snapshot_and_alerts_owners(
    home, first_run, demo, monkeypatch, http_sink
):
    from ledgerband.flows.monthly import monthly_run
    from ledgerband.tasks.core.settings import get_settings

    current = _q(home, "select run_id from published.snapshots where is_current")
    monkeypatch.setenv("LEDGERBAND_ACCURACY__MIN_BAND_SKILL", "0.99")
    address, received = http_sink
    monkeypatch.setenv("LEDGERBAND_ALERT_URLS_MODEL", f"json://{address}/model-owners")
    get_settings.cache_clear()
    with pytest.raises(
        GateStopped,
        match="accuracy gate stopped the run: .*band-accuracy skill .*lower bound.* < accuracy.min_band_skill 99.00%",
    ):
        monthly_run("2026-10", demo.landing_dir)
    assert _q(home, "select run_id from published.snapshots where is_current") == current
    [(status, error)] = _q(home, "select status, error from ops.runs order by started_at desc limit 1")
    assert status == "withheld" and "min_band_skill" in error
    alerts = [json.loads(line) for line in (home / "alerts" / "alerts.jsonl").read_text().splitlines()]
    assert alerts[-1]["state"] == "Failed" and "min_band_skill" in alerts[-1]["reason"]
    assert alerts[-1]["status"] == "withheld" and alerts[-1]["exit_code"] == 3
    # The model owners' webhook heard of it, with the period, gate, exit code and report.
    [hit] = received
    assert hit["path"] == "/model-owners"
    assert hit["body"]["title"] == "ledgerband 2026-10: run withheld by the accuracy gate"
    [(withheld_run,)] = _q(home, "select run_id from ops.runs order by started_at desc limit 1")
    assert (
        "exit code 3" in hit["body"]["message"]
        and f"reports/2026-10/{withheld_run}.html" in hit["body"]["message"]
    )
    assert "Withheld by the accuracy gate" in (home / "reports" / "2026-10" / "index.html").read_text()
    # Readers see the withheld decision next to the unchanged current snapshot.
    reader = duckdb.connect(str(home / "published" / "ledgerband_published.duckdb"), read_only=True)
    assert reader.execute("select run_id from snapshots where is_current").fetchall() == current
    assert ("accuracy", "stop") in reader.execute("select gate, decision from decisions").fetchall()
    reader.close()


def test_bad_extract_stops_the_run_at_the_quality_gate(home, first_run, monkeypatch, tmp_path):
    from ledgerband.flows.monthly import monthly_run
    from ledgerband.tasks.core.settings import get_settings

    landing = tmp_path / "landing"
    shutil.copytree(Path(__file__).parents[1] / "fixtures" / "ledger_bad", landing)
    monkeypatch.setenv("LEDGERBAND_HOME", str(tmp_path / "state"))
    monkeypatch.setenv("LEDGERBAND_FEATURES__WINDOW_MONTHS", "1")
    monkeypatch.setenv("LEDGERBAND_PAYROLL__LOOKBACK_MONTHS", "1")
    get_settings.cache_clear()
    with pytest.raises(
        GateStopped,
        match="quality gate stopped the run: .*ledger-2026-10.csv: quarantined share "
        "85.71% \\(6 of 7 records\\)",
    ):
        monthly_run("2026-10", landing)
    assert _q(tmp_path / "state", "select status from ops.runs") == [("stopped",)]
    assert _q(tmp_path / "state", "select status from ops.loads where dataset = 'ledger'") == [("rejected",)]
    # Every check's decision is kept; the quarantine share is the one that stopped the run.
    assert _q(
        tmp_path / "state", "select gate, check_name, decision from published.decisions order by decided_at"
    ) == [
        ("quality", "extract_contract", "pass"),
        ("quality", "manifest_reconciliation", "pass"),
        ("quality", "quarantine_share", "stop"),
    ]
    html = (tmp_path / "state" / "reports" / "2026-10" / "index.html").read_text()
    assert "Stopped by the quality gate" in html and "amount_format" in html and "line 4" in html
    reader = duckdb.connect(
        str(tmp_path / "state" / "published" / "ledgerband_published.duckdb"), read_only=True
    )
    assert reader.execute("select gate, decision from decisions where decision = 'stop'").fetchall() == [
        ("quality", "stop")
    ]
    assert reader.execute("select count(*) from income_bands").fetchall() == [(0,)]
    reader.close()


def test_cli_names_the_missing_period_folder_without_a_traceback(prefect_api, tmp_path, monkeypatch):
    from typer.testing import CliRunner

    from ledgerband.flows.cli import app
    from ledgerband.tasks.core.settings import get_settings

    monkeypatch.setenv("LEDGERBAND_HOME", str(tmp_path / "state"))
    get_settings.cache_clear()
    (tmp_path / "landing").mkdir()
    result = CliRunner().invoke(app, ["run", "--period", "2026-10", "--landing", str(tmp_path / "landing")])
    assert result.exit_code == 2
    assert (
        f"no landing folder for period 2026-07: expected {tmp_path / 'landing' / '2026-07'}" in result.output
    )
    assert "Traceback" not in result.output


def test_estimates_for_customers_without_payroll_are_not_biased(home, first_run, demo):
    """Cross-validation only sees salaried customers; the generator's true incomes check the others.

    Guards against features whose meaning differs between the two groups (income credits did: they
    once biased every estimate by about a third of the mean income).
    """
    from ledgerband.tasks.core.settings import get_settings
    from ledgerband.tasks.demo.truth import truth_check

    con = duckdb.connect(str(home / "warehouse.duckdb"), read_only=True)
    t = truth_check(con, demo.answers, first_run.run_id, get_settings().bands.edges)
    con.close()
    assert t["customers_estimated"] >= 30
    assert abs(t["mean_error"]) < 0.10 * t["mean_true_income"]


def test_a_month_whose_payroll_codes_vanish_is_stopped_by_the_label_gate(prefect_api, tmp_path, monkeypatch):
    """A sender that stops coding salary (purpose SALA, sub-family SALA) in the run's month stops the run."""
    import csv
    import hashlib

    from ledgerband.flows.monthly import monthly_run
    from ledgerband.tasks.core.settings import get_settings
    from ledgerband.tasks.demo.generator import generate

    monkeypatch.setenv("LEDGERBAND_HOME", str(tmp_path / "state"))
    get_settings.cache_clear()
    s = get_settings()
    files = generate(
        s.demo_landing_dir, s.demo_answers_path, customers=300, months=4, end_period="2026-10", seed=5
    )
    last = files.extracts[-1]
    with last.open(newline="") as f:
        rows = list(csv.DictReader(f))
    for row in rows:
        if row["purpose_code"] == "SALA":
            row["purpose_code"] = ""
        if row["bank_txn_code"] == "PMNT/RCDT/SALA":
            row["bank_txn_code"] = "PMNT/RCDT/DMCT"
    with last.open("w", newline="") as f:
        writer = csv.DictWriter(f, fieldnames=list(rows[0]), lineterminator="\n")
        writer.writeheader()
        writer.writerows(rows)
    manifest = json.loads(files.manifests[-1].read_text())
    manifest["sha256"] = hashlib.sha256(last.read_bytes()).hexdigest()
    files.manifests[-1].write_text(json.dumps(manifest))

    with pytest.raises(
        GateStopped, match="labels gate stopped the run: salary-coded credits in the run's month fell 100.00%"
    ):
        monthly_run("2026-10", files.landing_dir)
    state = tmp_path / "state"
    assert _q(state, "select status from ops.runs") == [("stopped",)]
    assert _q(state, "select gate, decision from published.decisions where decision = 'stop'") == [
        ("labels", "stop")
    ]
    assert _q(state, "select count(*) from published.snapshots") == [(0,)]


def test_a_published_month_whose_readers_copy_fails_is_still_recorded_as_published(
    home, first_run, demo, monkeypatch
):
    """Found in review: ops.runs said 'failed' for a month whose snapshot had become current."""
    from prefect import task

    import ledgerband.flows.monthly as monthly

    @task(name="refresh-reader-copy")
    def broken_copy(ctx):
        raise PermissionError("published folder is read-only")

    monkeypatch.setattr(monthly, "refresh_reader_copy_task", broken_copy)
    with pytest.raises(PermissionError):
        monthly.monthly_run("2026-10", demo.landing_dir)
    [(run_id, status, error)] = _q(
        home, "select run_id, status, error from ops.runs order by started_at desc limit 1"
    )
    assert status == "published" and "reader_copy failed: PermissionError" in error
    assert _q(home, "select run_id from published.snapshots where is_current") == [(run_id,)]


def test_readme_lists_the_published_contract_from_the_comments(first_run):
    from ledgerband.tasks.publish.readers_contract import markdown

    readme = (Path(__file__).resolve().parents[2] / "README.md").read_text()
    documented = readme.split("<!-- contract:start -->\n", 1)[1].split("\n<!-- contract:end -->", 1)[0]
    reader = duckdb.connect(str(first_run.published_path), read_only=True)
    try:
        catalog = reader.execute("select current_database()").fetchall()[0][0]
        assert documented == markdown(reader, catalog), (
            "README and comments differ: run `ledgerband contract`"
        )
        undescribed = reader.execute(
            "select table_name, column_name from duckdb_columns() where not internal and comment is null"
        ).fetchall()
        assert undescribed == []
    finally:
        reader.close()


def test_small_cells_are_suppressed_for_readers_and_only_those(home, first_run):
    # Threshold rule of statistical disclosure control (common practice: 10): readers never see a count
    # under the threshold; every count at or above it is shown.
    reader = duckdb.connect(str(first_run.published_path), read_only=True)
    try:
        shown_small = reader.execute(
            "select count(*) from band_summary where customer_count < 10"
        ).fetchall()[0][0]
        marked = reader.execute(
            "select count(*) filter (where suppressed), count(*) filter (where suppressed and customer_count is null) "
            "from band_summary"
        ).fetchall()[0]
    finally:
        reader.close()
    exact = _q(
        home,
        "select count(*) filter (where customer_count < 10), count(*) filter (where suppressed) "
        "from published.band_summary",
    )[0]
    assert shown_small == 0 and marked[0] == marked[1] == exact[0] == exact[1] > 0


def test_parquet_by_period_equals_the_published_tables(home, first_run):
    root = home / "published" / "parquet"
    con = duckdb.connect(str(first_run.published_path), read_only=True)
    try:
        for table, measure in (
            ("income_bands", "annual_income_estimate"),
            ("band_summary", "customer_count"),
        ):
            parquet = con.execute(
                f"select period, count(*), sum({measure}) from read_parquet('{root}/{table}/*/*.parquet', "
                "hive_partitioning = true) group by all"
            ).fetchall()
            published = con.execute(
                f"select period, count(*), sum({measure}) from {table} group by all"
            ).fetchall()
            assert parquet == published and parquet[0][0] == "2026-10"
    finally:
        con.close()


def test_every_run_keeps_its_report_and_the_index_lists_them(home, first_run):
    reports = home / "reports"
    runs = _q(home, "select run_id from ops.runs")
    index = (reports / "index.html").read_text()
    for (run_id,) in runs:
        assert run_id[:8] in index
        if (reports / "2026-10" / f"{run_id}.html").exists():
            assert f'href="2026-10/{run_id}.html"' in index
    assert (reports / "2026-10" / f"{first_run.run_id}.html").exists()
    assert "Internal reporting only" in index


CHROMIUM, CHROMEDRIVER = Path("/usr/bin/chromium"), Path("/usr/bin/chromedriver")


@pytest.mark.skipif(
    not (CHROMIUM.exists() and CHROMEDRIVER.exists()),
    reason="Chromium is not installed: `make browser` installs Debian's chromium and chromium-driver",
)
def test_the_report_renders_in_a_real_browser(first_run, tmp_path):
    # Headless Chromium through Selenium, no network: no console errors, every picture drawn with a size,
    # the cautions visible on the page.
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service
    from selenium.webdriver.common.by import By

    options = webdriver.ChromeOptions()
    options.binary_location = str(CHROMIUM)
    for flag in (
        "--headless",
        "--no-sandbox",
        "--disable-gpu",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
        "--no-first-run",
        f"--user-data-dir={tmp_path / 'profile'}",
        "--window-size=1280,2000",
    ):
        options.add_argument(flag)
    options.set_capability("goog:loggingPrefs", {"browser": "ALL"})
    driver = webdriver.Chrome(service=Service(str(CHROMEDRIVER)), options=options)
    try:
        driver.get(first_run.report.resolve().as_uri())
        shot = tmp_path / "report.png"
        driver.save_screenshot(str(shot))
        assert shot.stat().st_size > 10_000
        errors = [e for e in driver.get_log("browser") if e["level"] in ("SEVERE", "ERROR")]
        assert errors == []
        plots = driver.find_elements(By.CSS_SELECTOR, "figure.plot svg")
        assert len(plots) >= 5
        for svg in plots:
            assert svg.size["width"] > 100 and svg.size["height"] > 100
        cautions = driver.find_element(By.CSS_SELECTOR, "section.cautions")
        assert cautions.is_displayed() and "Internal reporting only" in cautions.text
    finally:
        driver.quit()


def test_no_customer_level_value_reaches_alerts_artifacts_or_reports(home, first_run, demo):
    """Runs published, withheld and stopped by now (the tests above): every Prefect artifact, alert, report
    and validation page, and the run records and decisions that reach alerts and readers, are scanned for
    the demo's customer ids and posting amounts. (The runs' INFO logs are scanned in test_real_server,
    where they reach the API as in an operator's setup.)"""
    from prefect.client.orchestration import get_client

    from tests.leaks import demo_needles, leaks, verified_pairs

    ids, amounts = demo_needles(demo.customers, demo.extracts, demo.verified_incomes)
    assert len(ids) > 10 * CUSTOMERS and len(amounts) > 1_000
    # the verified incomes (personal data) are among the needles
    verified_amounts = {a for _, a in verified_pairs(demo.verified_incomes) if a in amounts}
    assert len(verified_amounts) > CUSTOMERS // 20
    texts: dict[str, str] = {}
    for path in sorted((home / "reports").rglob("*")) + [home / "alerts" / "alerts.jsonl"]:
        if path.is_file() and path.suffix in (".html", ".json", ".jsonl"):
            texts[str(path.relative_to(home))] = path.read_text()
    texts["ops.runs"] = json.dumps(_q(home, "select error, stages, gate_figures from ops.runs"), default=str)
    texts["published.decisions"] = json.dumps(
        _q(home, "select reason, figures, thresholds from published.decisions"), default=str
    )
    logs, artifacts = [], []
    with get_client(sync_client=True) as client:  # every page: the API returns at most 200 at a time
        for read, into in ((client.read_logs, logs), (client.read_artifacts, artifacts)):
            while page := read(limit=200, offset=len(into)):
                into.extend(page)
    texts["prefect logs (warnings and errors)"] = "\n".join(log.message for log in logs)
    texts["prefect artifacts"] = "\n".join(json.dumps(a.data, default=str) for a in artifacts)
    assert artifacts and any(k.endswith(".validation.json") for k in texts)
    planted = f"<td>{min(ids)}</td> paid {float(min(amounts)):,.2f}"  # the scan finds what it looks for
    assert leaks({"planted.html": planted}, ids, amounts) == {"planted.html": [min(ids), min(amounts)]}
    assert leaks(texts, ids, amounts) == {}


def test_the_verified_incomes_are_staged_for_the_run_and_never_published(home, first_run, demo):
    """The demo's verified incomes file is read (every record valid for October 2026: accepted), staged
    with the fixed interface, counted in the run's records, and not one verified customer/amount pair or
    table reaches the readers' copy or its Parquet files."""
    from tests.leaks import verified_in_rows, verified_pairs

    pairs = verified_pairs(demo.verified_incomes)
    assert len(pairs) > CUSTOMERS // 20
    columns = _q(
        home,
        "select column_name, data_type from information_schema.columns "
        "where table_schema = 'staging' and table_name = 'verified_incomes' order by ordinal_position",
    )
    assert columns == [
        ("customer_id", "VARCHAR"),
        ("verified_on", "DATE"),
        ("annual_net_income", "DOUBLE"),
        ("source", "VARCHAR"),
    ]
    staged = _q(home, "select customer_id, annual_net_income from staging.verified_incomes")
    assert {(c, f"{a:.2f}") for c, a in staged} == pairs
    assert _q(
        home,
        "select rows_in_file, rows_accepted, rows_quarantined from ops.verified_income_runs where run_id = ?",
        [first_run.run_id],
    ) == [(len(pairs), len(pairs), 0)]
    [(reason,)] = _q(
        home,
        "select reason from published.decisions where run_id = ? and check_name = 'verified_incomes'",
        [first_run.run_id],
    )
    assert (
        reason
        == f"verified_incomes.csv: {len(pairs)} of {len(pairs)} records accepted, 0 quarantined (0.00%)"
    )

    published = duckdb.connect(str(home / "published" / "ledgerband_published.duckdb"), read_only=True)
    try:
        tables = [
            f"{schema}.{table}"
            for schema, table in published.execute(
                "select schema_name, table_name from duckdb_tables() union all "
                "select schema_name, view_name from duckdb_views() where not internal"
            ).fetchall()
        ]
        assert tables and not [t for t in tables if "verified" in t]
        rows = [row for t in tables for row in published.execute(f"select * from {t}").fetchall()]
        parquet = sorted((home / "published" / "parquet").rglob("*.parquet"))
        for path in parquet:
            rows += published.execute("select * from read_parquet(?)", [str(path)]).fetchall()
    finally:
        published.close()
    assert parquet and len(rows) > CUSTOMERS
    # the scan finds what it looks for
    customer, amount = sorted(pairs)[0]
    assert verified_in_rows([("x", customer, float(amount))], pairs) == [(customer, amount)]
    assert verified_in_rows(rows, pairs) == []


def test_a_forest_champion_above_its_tree_row_bound_says_so_in_the_report(home, first_run, tmp_path):
    """`train.forest_max_tree_rows` binds only at large banks; here it is set below this bank's draw.
    The fitted forest reports the bound, the summary carries it and the report's line states it."""
    from ledgerband.tasks.core.context import RunContext
    from ledgerband.tasks.core.settings import Settings
    from ledgerband.tasks.core.warehouse import open_warehouse
    from ledgerband.tasks.modeling.train import train_and_predict
    from ledgerband.tasks.report.run_report import gather, render

    shutil.copy(home / "warehouse.duckdb", tmp_path / "warehouse.duckdb")
    bounded = {"candidates": ["random_forest"], "forest_trees": 10, "forest_max_tree_rows": 100}
    for train, expected in ((bounded, 100), ({**bounded, "forest_max_tree_rows": 100000}, None)):
        settings = Settings(home=tmp_path, train=train)
        ctx = RunContext.create("2026-10", settings=settings, run_id=first_run.run_id)
        with open_warehouse(ctx.warehouse, settings.scale) as con:
            summary = train_and_predict(con, ctx)
            context = gather(con, ctx)
        assert summary.champion == "random_forest" and summary.n_labelled * 0.5 > 100
        assert summary.forest_tree_rows == expected
        accuracy = next(
            d for d in context["decisions"] if d["gate"] == "accuracy" and d["check_name"] == "accuracy"
        )
        accuracy["figures"] = summary.figures()  # the gate writes these figures as they are
        html = render(context)
        assert ("the forest's trees each grown on at most 100 of them" in html) == (expected is not None)
