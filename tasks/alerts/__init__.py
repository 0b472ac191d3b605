"""Alerts to the owners when a run fails, stops or is withheld.

Every alert is first appended to the local JSON-lines log in the state folder (so none is lost), then
sent with apprise (email, JSON webhook and the other services apprise speaks) to the audience that owns
the stage where the run ended:
- `data`: ingest, validate, features (the quality gate);
- `model`: label gate, training, accuracy and drift gates;
- `publish`: publish, report, the readers' copy.
A run that ended before any stage (or crashed) goes to every audience. Each audience's apprise URLs come
from an environment variable named in settings (`alerts.data_urls_env`, ...), never from the TOML: URLs
carry credentials. Delivery is tried `alerts.attempts` times; every outcome is recorded in `ops.alerts`
(channel = the URL's scheme, never the URL), and an undelivered alert is shown by `ledgerband status`.

To add a sink: it is an apprise URL — nothing to code. See DEVELOPERS.md for testing one locally.
"""

from __future__ import annotations

import json
import os
import time
import uuid
from datetime import UTC, datetime
from pathlib import Path

from ledgerband.tasks.core.errors import GateStopped

STAGE_AUDIENCE = {
    "ingest": "data",
    "validate": "data",
    "features": "data",
    "label_gate": "model",
    "train": "model",
    "accuracy_gate": "model",
    "drift_gate": "model",
    "publish": "publish",
    "report": "publish",
    "reader_copy": "publish",
    "parquet": "publish",
}
AUDIENCES = ("data", "model", "publish")


def write_alert(log_path: Path, alert: dict) -> dict:
    """Append one alert to the local log (always first: the log is the record of last resort)."""
    log_path.parent.mkdir(parents=True, exist_ok=True)
    with log_path.open("a", encoding="utf-8") as f:
        f.write(json.dumps(alert, default=str) + "\n")
    return alert


def _run_facts(settings, run_id: str) -> dict:
    """What ops.runs and published.decisions say about the run (empty if the warehouse cannot tell)."""
    from ledgerband.tasks.core.queries import run_query
    from ledgerband.tasks.core.warehouse import connect

    if not settings.warehouse_path.exists():
        return {}
    try:
        con = connect(settings.warehouse_path)
    except Exception:  # an alert must go out even when the warehouse cannot be read
        return {}
    try:
        runs = con.execute(
            "select period, status, error, stages from ops.runs where run_id = ?", [run_id]
        ).fetchall()
        if not runs:
            return {}
        period, status, error, stages = runs[0]
        stages = json.loads(stages) if stages else []
        ended = next((s["stage"] for s in stages if s["status"] in ("failed", "stopped")), None)
        stop = run_query(con, "alerts", "first_stop", run_id=run_id).fetchall()
        facts = {"period": period, "status": status, "error": error, "stage": ended}
        if stop:
            facts.update(gate=stop[0][0], check=stop[0][1], reason=stop[0][2])
        return facts
    except Exception:  # the run's facts are a courtesy: the alert goes out without them
        return {}
    finally:
        con.close()


def exit_code_for(facts: dict) -> int:
    """The exit code the CLI gives for this ending (see README: exit codes)."""
    if facts.get("status") in ("stopped", "withheld"):
        return 2 if facts.get("check") in GateStopped.BAD_INPUT_CHECKS else 3
    error = facts.get("error") or ""
    if error.startswith(("LedgerbandError", "ExtractError", "ValidationEngineError", "ValueError")):
        return 2
    return 1


def build_alert(settings, *, run_id: str, flow_run: str, state: str, message: str) -> dict:
    facts = _run_facts(settings, run_id)
    period = facts.get("period")
    report = settings.reports_dir / period / f"{run_id}.html" if period else None  # this run's own page
    audience = STAGE_AUDIENCE.get(facts.get("stage") or "", None)
    return {
        "at": datetime.now(UTC).isoformat(timespec="seconds"),
        "run_id": run_id,
        "flow_run": flow_run,
        "period": period,
        "state": state,
        "status": facts.get("status") or "failed",
        "stage": facts.get("stage"),
        "gate": facts.get("gate"),
        "check": facts.get("check"),
        "reason": facts.get("reason") or facts.get("error") or message,
        "exit_code": exit_code_for(facts) if facts else 1,
        "report": str(report) if report and report.exists() else None,
        "audiences": [audience] if audience else list(AUDIENCES),
        "owners": list(settings.owners),
    }


def render(alert: dict) -> tuple[str, str]:
    """Title and plain-text body of an alert."""
    what = {"withheld": "withheld", "stopped": "stopped"}.get(alert["status"], "failed")
    title = f"ledgerband {alert['period'] or ''}: run {what}".replace("  ", " ")
    if alert["gate"]:
        title += f" by the {alert['gate']} gate"
    lines = [
        f"Period: {alert['period'] or 'unknown'}",
        f"Outcome: {alert['status']} (exit code {alert['exit_code']})",
        f"Stage: {alert['stage'] or 'before any stage'}",
    ]
    if alert["gate"]:
        lines.append(f"Gate: {alert['gate']} / {alert['check']}")
    lines += [
        f"Why: {alert['reason']}",
        f"Run: {alert['run_id']} ({alert['flow_run']})",
        f"Report: {alert['report'] or 'none written'}",
        f"Time (UTC): {alert['at']}",
        "Nothing from this run was published; the previous snapshot stays current."
        if alert["status"] != "published"
        else "",
    ]
    return title, "\n".join(line for line in lines if line)


def urls_for(settings, audience: str) -> list[str]:
    """The apprise URLs of one audience, from the environment variable settings name (space or comma)."""
    name = getattr(settings.alerts, f"{audience}_urls_env")
    raw = os.environ.get(name, "")
    return [u for u in raw.replace(",", " ").split() if u]


def deliver(alert: dict, settings) -> list[dict]:
    """Send the alert to each of its audiences' URLs; retry; record every outcome in ops.alerts."""
    import apprise

    title, body = render(alert)
    outcomes = []
    for audience in alert["audiences"]:
        for url in urls_for(settings, audience):
            channel = url.split("://", 1)[0]
            sender = apprise.Apprise()
            error = None
            attempts = 0
            delivered = False
            if not sender.add(url):
                error = f"apprise does not understand a {channel}:// URL"
            else:
                for attempts in range(1, settings.alerts.attempts + 1):
                    with apprise.LogCapture(level=apprise.logging.WARNING) as logs:
                        delivered = bool(
                            sender.notify(title=title, body=body, body_format=apprise.NotifyFormat.TEXT)
                        )
                    if delivered:
                        break
                    error = " ".join(logs.getvalue().split())[-500:] or "apprise reported failure"
                    if attempts < settings.alerts.attempts:
                        time.sleep(settings.alerts.retry_seconds)
            outcomes.append(
                {
                    "alert_id": str(uuid.uuid4()),
                    "run_id": alert["run_id"],
                    "period": alert["period"],
                    "audience": audience,
                    "channel": channel,
                    "status": "delivered" if delivered else "undelivered",
                    "attempts": attempts,
                    "error": None if delivered else error,
                    "title": title,
                    "sent_at": datetime.now(UTC).replace(tzinfo=None),
                }
            )
    if not outcomes:
        outcomes.append(
            {
                "alert_id": str(uuid.uuid4()),
                "run_id": alert["run_id"],
                "period": alert["period"],
                "audience": ",".join(alert["audiences"]),
                "channel": "local_log",
                "status": "logged",
                "attempts": 1,
                "error": None,
                "title": title,
                "sent_at": datetime.now(UTC).replace(tzinfo=None),
            }
        )
    _record(settings, outcomes)
    return outcomes


def _record(settings, outcomes: list[dict]) -> None:
    import pandas as pd

    from ledgerband.tasks.core.warehouse import apply_schema, connect

    try:
        con = connect(settings.warehouse_path)
    except Exception:  # the local log already holds the alert
        return
    try:
        apply_schema(con)
        con.register("alert_rows", pd.DataFrame(outcomes))
        con.execute("insert into ops.alerts by name select * from alert_rows")
        con.unregister("alert_rows")
    finally:
        con.close()


def alert_owners_hook(flow, flow_run, state) -> None:
    """Prefect on_failure / on_crashed hook: log the alert locally, then send it to its audiences."""
    from prefect.logging import get_logger

    from ledgerband.tasks.core.settings import get_settings
    from ledgerband.tasks.ops.runlock import RunLocked

    message = state.message or ""
    if RunLocked.MARK in message:
        return  # a start refused because another run is going: nothing failed, nobody to wake
    settings = get_settings()
    alert = build_alert(
        settings,
        run_id=str(flow_run.id),
        flow_run=f"{flow.name}/{flow_run.name}",
        state=state.name,
        message=message,
    )
    write_alert(settings.alerts_log, alert)
    outcomes = deliver(alert, settings)
    logger = get_logger("ledgerband.alerts")
    sent = [o for o in outcomes if o["status"] == "delivered"]
    failed = [o for o in outcomes if o["status"] == "undelivered"]
    if failed:
        logger.error(
            "alert NOT delivered to %s (recorded in ops.alerts, shown by `ledgerband status`); local log: %s",
            ", ".join(f"{o['audience']}:{o['channel']}" for o in failed),
            settings.alerts_log,
        )
    if sent:
        logger.warning("alert sent to %s", ", ".join(f"{o['audience']}:{o['channel']}" for o in sent))
    if not sent and not failed:
        logger.warning(
            "alert written to %s (no alert URLs configured: set %s)",
            settings.alerts_log,
            ", ".join(getattr(settings.alerts, f"{a}_urls_env") for a in alert["audiences"]),
        )
