"""Alerts reach real receivers on 127.0.0.1: a JSON webhook (HTTP) and email (SMTP, aiosmtpd); a
receiver that is down leaves an undelivered record, never a silent loss."""

from __future__ import annotations

import socket

import duckdb

from ledgerband.tasks.alerts import deliver, render, write_alert
from ledgerband.tasks.core.settings import Settings


def _alert(**changes) -> dict:
    return {
        "at": "2026-11-03T06:04:11+00:00",
        "run_id": "7f1c0d1e-0000-4000-8000-000000000001",
        "flow_run": "ledgerband-monthly-run/monthly-2026-10",
        "period": "2026-10",
        "state": "Failed",
        "status": "withheld",
        "stage": "accuracy_gate",
        "gate": "accuracy",
        "check": "accuracy",
        "reason": "band-accuracy skill over baseline_median 12.00% (95% lower bound 8.00%) < accuracy.min_band_skill 20.00%",
        "exit_code": 3,
        "report": "/srv/ledgerband/reports/2026-10/index.html",
        "audiences": ["model"],
        "owners": ["data-engineering@corrandale.example"],
        **changes,
    }


def _settings(tmp_path) -> Settings:
    return Settings(home=tmp_path, alerts={"retry_seconds": 0})


def _alerts_table(tmp_path):
    con = duckdb.connect(str(tmp_path / "warehouse.duckdb"), read_only=True)
    try:
        return con.execute("select audience, channel, status, attempts, error from ops.alerts").fetchall()
    finally:
        con.close()


def test_a_webhook_receives_the_alert_with_every_fact(tmp_path, monkeypatch, http_sink):
    address, received = http_sink
    monkeypatch.setenv("LEDGERBAND_ALERT_URLS_MODEL", f"json://{address}/ledgerband")
    outcomes = deliver(_alert(), _settings(tmp_path))
    assert [o["status"] for o in outcomes] == ["delivered"]
    [hit] = received
    assert hit["path"] == "/ledgerband"
    title, body = hit["body"]["title"], hit["body"]["message"]
    assert title == "ledgerband 2026-10: run withheld by the accuracy gate"
    for fact in (
        "Period: 2026-10",
        "withheld (exit code 3)",
        "Stage: accuracy_gate",
        "< accuracy.min_band_skill 20.00%",
        "Run: 7f1c0d1e-0000-4000-8000-000000000001",
        "Report: /srv/ledgerband/reports/2026-10/index.html",
        "Time (UTC): 2026-11-03T06:04:11+00:00",
    ):
        assert fact in body
    assert _alerts_table(tmp_path) == [("model", "json", "delivered", 1, None)]


def test_email_reaches_an_smtp_server(tmp_path, monkeypatch, smtp_sink):
    address, received = smtp_sink
    monkeypatch.setenv(
        "LEDGERBAND_ALERT_URLS_MODEL",
        f"mailto://{address}?from=ledgerband@corrandale.example&to=model-owners@corrandale.example&mode=insecure",
    )
    deliver(_alert(), _settings(tmp_path))
    [mail] = received
    assert mail["to"] == ["model-owners@corrandale.example"]
    assert "Subject: ledgerband 2026-10: run withheld by the accuracy gate" in mail["content"]
    assert "accuracy.min_band_skill" in mail["content"]


def test_an_alert_goes_only_to_the_owners_of_the_stage(tmp_path, monkeypatch, http_sink):
    address, received = http_sink
    monkeypatch.setenv("LEDGERBAND_ALERT_URLS_DATA", f"json://{address}/data")
    monkeypatch.setenv("LEDGERBAND_ALERT_URLS_MODEL", f"json://{address}/model")
    deliver(_alert(stage="validate", gate="quality", audiences=["data"]), _settings(tmp_path))
    assert [r["path"] for r in received] == ["/data"]


def test_a_receiver_that_is_down_leaves_an_undelivered_record(tmp_path, monkeypatch):
    with socket.socket() as s:  # a port nobody listens on
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    monkeypatch.setenv("LEDGERBAND_ALERT_URLS_MODEL", f"json://127.0.0.1:{port}/hook")
    [outcome] = deliver(_alert(), _settings(tmp_path))
    assert outcome["status"] == "undelivered" and outcome["attempts"] == 3
    [(audience, channel, status, attempts, error)] = _alerts_table(tmp_path)
    assert (audience, channel, status, attempts) == ("model", "json", "undelivered", 3) and error


def test_with_nothing_configured_the_local_log_is_the_record(tmp_path):
    s = _settings(tmp_path)
    write_alert(s.alerts_log, _alert())
    [outcome] = deliver(_alert(), s)
    assert outcome["status"] == "logged" and outcome["channel"] == "local_log"
    assert s.alerts_log.read_text().count("accuracy.min_band_skill") == 1


def test_render_says_a_failed_run_published_nothing():
    title, body = render(_alert(status="failed", gate=None, check=None, stage="train", exit_code=1))
    assert title == "ledgerband 2026-10: run failed"
    assert "Nothing from this run was published" in body and "Gate:" not in body


def test_status_shows_an_alert_that_did_not_arrive(tmp_path, monkeypatch):
    from typer.testing import CliRunner

    from ledgerband.flows.cli import app

    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    monkeypatch.setenv("LEDGERBAND_HOME", str(tmp_path))
    monkeypatch.setenv("LEDGERBAND_ALERT_URLS_MODEL", f"json://127.0.0.1:{port}/hook")
    deliver(_alert(), _settings(tmp_path))
    result = CliRunner().invoke(app, ["status"])
    said = " ".join(result.output.split())
    assert result.exit_code == 0, said
    assert "Alerts that did not reach their owners" in said and "to model by json, 3 attempt(s)" in said
