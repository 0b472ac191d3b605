"""Two months in a row: the second is compared with the first (drift, out of time), and a large move
withholds it."""

from __future__ import annotations

import duckdb
import pytest

from ledgerband.tasks.core.errors import GateStopped


@pytest.fixture(scope="module")
def two_months(tmp_path_factory, prefect_api):
    home = tmp_path_factory.mktemp("drift-home")
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("LEDGERBAND_HOME", str(home))
        from ledgerband.flows.monthly import monthly_run
        from ledgerband.tasks.core.settings import get_settings
        from ledgerband.tasks.demo.generator import generate

        get_settings.cache_clear()
        s = get_settings()
        files = generate(
            s.demo_landing_dir, s.demo_answers_path, customers=400, months=5, end_period="2026-10", seed=5
        )
        september = monthly_run("2026-09", files.landing_dir)
        october = monthly_run("2026-10", files.landing_dir)
        yield home, files, september, october


def _q(home, query, params=None):
    con = duckdb.connect(str(home / "warehouse.duckdb"), read_only=True)
    try:
        return con.execute(query, params).fetchall()
    finally:
        con.close()


def test_the_second_month_is_compared_with_the_first(two_months):
    import json

    home, _, september, october = two_months
    [(first_reason,)] = _q(
        home, "select reason from published.decisions where run_id = ? and gate = 'drift'", [september.run_id]
    )
    assert "no earlier published month" in first_reason
    [(outcome, figures)] = _q(
        home,
        "select decision, figures from published.decisions where run_id = ? and gate = 'drift'",
        [october.run_id],
    )
    figures = json.loads(figures)
    assert outcome in ("pass", "warn") and figures["compared_with"] == "2026-09"
    subjects = {s for (s,) in _q(home, "select subject from ml.drift where run_id = ?", [october.run_id])}
    assert {"label:annual_salary", "band_shares", "median_balance"} <= subjects
    # Last month's saved model scored this month's labelled customers.
    oot = figures["out_of_time"]
    assert oot["customers"] > 100 and oot["mae_now"] > 0 and oot["mae_cross_validated"] > 0


def test_a_large_move_withholds_the_month(two_months, monkeypatch):
    from ledgerband.flows.monthly import monthly_run
    from ledgerband.tasks.core.settings import get_settings

    home, files, _, october = two_months
    monkeypatch.setenv("LEDGERBAND_DRIFT__PSI_STOP", "0.000001")
    get_settings.cache_clear()
    with pytest.raises(GateStopped, match="drift gate stopped the run: since 2026-09, PSI >= drift.psi_stop"):
        monthly_run("2026-10", files.landing_dir)
    [(status,)] = _q(home, "select status from ops.runs order by started_at desc limit 1")
    assert status == "withheld"
    assert _q(home, "select run_id from published.snapshots where is_current") == [(october.run_id,)]


def _cli(*args):
    from typer.testing import CliRunner

    from ledgerband.flows.cli import app

    result = CliRunner().invoke(app, list(args))
    return result.exit_code, " ".join(result.output.split())


def test_backfill_skips_published_months_and_never_moves_readers_back(two_months):
    home, files, _, _ = two_months
    current = _q(home, "select run_id, period from published.snapshots where is_current")
    code, said = _cli("backfill", "--from", "2026-09", "--to", "2026-10", "--landing", str(files.landing_dir))
    assert (
        code == 0 and "2026-09: already published, skipped" in said and "2026-10: already published" in said
    )
    code, said = _cli(
        "backfill", "--from", "2026-09", "--to", "2026-09", "--force", "--landing", str(files.landing_dir)
    )
    assert code == 0 and "2026-09: published (historical snapshot; the current one stays)" in said
    # Readers still see October; September's new snapshot is there by period.
    assert _q(home, "select run_id, period from published.snapshots where is_current") == current
    assert _q(home, "select count(*) from published.snapshots where period = '2026-09'")[0][0] == 2


def test_backfill_stops_at_the_first_month_that_fails(two_months):
    _, files, _, _ = two_months
    code, said = _cli(
        "backfill", "--from", "2026-05", "--to", "2026-06", "--force", "--landing", str(files.landing_dir)
    )
    assert code == 2 and "Backfill stopped at 2026-05" in said


def _correct_one_counterparty(files, period: str) -> None:
    """A corrected extract as a sender would issue it: one counterparty fixed, a new manifest checksum."""
    import hashlib
    import json

    [extract] = [p for p in files.extracts if period in p.name]
    [manifest] = [p for p in files.manifests if period in p.name]
    lines = extract.read_text().splitlines(keepends=True)
    header = lines[0].rstrip("\n").split(",")
    column = header.index("counterparty_id")
    for i in range(1, len(lines)):
        fields = lines[i].rstrip("\n").split(",")
        if fields[column]:
            fields[column] = "CP-CORRECTED"
            lines[i] = ",".join(fields) + "\n"
            break
    extract.write_text("".join(lines))
    spec = json.loads(manifest.read_text())
    spec["sha256"] = hashlib.sha256(extract.read_bytes()).hexdigest()
    manifest.write_text(json.dumps(spec))


def test_a_corrected_extract_is_taken_only_through_restate(two_months):
    home, files, _, _ = two_months
    _correct_one_counterparty(files, "2026-10")
    code, said = _cli("run", "--period", "2026-10", "--landing", str(files.landing_dir))
    assert code == 2 and "ledgerband restate --period 2026-10" in said  # never replaced silently
    code, said = _cli("restate", "--period", "2026-10", "--reason", "", "--landing", str(files.landing_dir))
    assert code == 2 and "needs a reason" in said
    code, said = _cli(
        "restate",
        "--period",
        "2026-10",
        "--reason",
        "sender fixed a counterparty",
        "--landing",
        str(files.landing_dir),
    )
    assert code == 0, said
    assert "2026-10 restated from the corrected extract: published" in said
    statuses = dict(
        _q(
            home,
            "select status, count(*) from ops.loads where dataset = 'ledger' and period = '2026-10' group by all",
        )
    )
    assert statuses == {"restated": 1, "accepted": 1}
    [(status, reason)] = _q(home, "select status, reason from ops.restatements")
    assert (status, reason) == ("done", "sender fixed a counterparty")
    assert (
        _q(home, "select count(*) from staging.transactions where counterparty_id = 'CP-CORRECTED'")[0][0]
        == 1
    )
    # Nothing to restate when the landing file is the accepted one.
    code, said = _cli(
        "restate", "--period", "2026-10", "--reason", "again", "--landing", str(files.landing_dir)
    )
    assert code == 2 and "are the accepted ones, unchanged" in said
