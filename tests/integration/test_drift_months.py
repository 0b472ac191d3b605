"""Two months in a row: the second is compared with the first (drift, out of time), and a large move
withholds it."""

from __future__ import annotations

import duckdb
import pytest

from ledgerband.tasks.errors import GateStopped

pytestmark = pytest.mark.integration


@pytest.fixture(scope="module")
def two_months(tmp_path_factory, prefect_api):
    home = tmp_path_factory.mktemp("drift-home")
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("LEDGERBAND_HOME", str(home))
        from ledgerband.flows.monthly import monthly_run
        from ledgerband.tasks.demo.generator import generate
        from ledgerband.tasks.settings import get_settings

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
    from ledgerband.tasks.settings import get_settings

    home, files, _, october = two_months
    monkeypatch.setenv("LEDGERBAND_DRIFT__PSI_STOP", "0.000001")
    get_settings.cache_clear()
    with pytest.raises(GateStopped, match="drift gate stopped the run: since 2026-09, PSI >= drift.psi_stop"):
        monthly_run("2026-10", files.landing_dir)
    [(status,)] = _q(home, "select status from ops.runs order by started_at desc limit 1")
    assert status == "withheld"
    assert _q(home, "select run_id from published.snapshots where is_current") == [(october.run_id,)]
