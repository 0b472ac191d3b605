"""Alerts to the owners when a run fails. The default sink is a local JSON-lines log in the state folder;
webhook and email sinks come with the scheduling work (see DEVELOPERS.md).

To add a sink: a function `(alert: dict, settings) -> None` that delivers one alert, called from
`alert_owners_hook` after the local log (the log is written first, so no alert is lost).
"""

from __future__ import annotations

import json
from datetime import datetime
from pathlib import Path


def write_alert(log_path: Path, *, flow_run: str, state: str, message: str, owners: tuple[str, ...]) -> dict:
    alert = {
        "at": datetime.now().isoformat(timespec="seconds"),
        "flow_run": flow_run,
        "state": state,
        "message": message,
        "owners": list(owners),
    }
    log_path.parent.mkdir(parents=True, exist_ok=True)
    with log_path.open("a", encoding="utf-8") as f:
        f.write(json.dumps(alert) + "\n")
    return alert


def alert_owners_hook(flow, flow_run, state) -> None:
    """Prefect on_failure hook: tell the owners which run failed and why."""
    from ledgerband.tasks.runlock import RunLocked
    from ledgerband.tasks.settings import get_settings

    if RunLocked.MARK in (state.message or ""):
        return  # a start refused because another run is going: nothing failed, nobody to wake
    settings = get_settings()
    write_alert(
        settings.alerts_log,
        flow_run=f"{flow.name}/{flow_run.name}",
        state=state.name,
        message=state.message or "",
        owners=settings.owners,
    )
