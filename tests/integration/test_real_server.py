"""The monthly schedule on a real `prefect server start` (127.0.0.1, a free port): deploy with the CLI,
read the scheduled runs back through the API (06:00 local on the 3rd, through daylight saving), run one
flow run through a process worker, and stop the server by its process group."""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import sys
import time
from datetime import UTC, datetime
from pathlib import Path
from zoneinfo import ZoneInfo

import httpx
import pytest

BIN = Path(sys.executable).parent
DUBLIN = ZoneInfo("Europe/Dublin")


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@pytest.fixture(scope="module")
def server(tmp_path_factory):
    root = tmp_path_factory.mktemp("real-server")
    port = _free_port()
    api = f"http://127.0.0.1:{port}/api"
    env = {k: v for k, v in os.environ.items() if not k.startswith("PREFECT_")}
    env.update(
        # As an operator's shell has them: Prefect's default INFO reaches the API (the run page shows
        # every stage); the console shows warnings only (the CLI's own default).
        PREFECT_LOGGING_LEVEL="INFO",
        PREFECT_LOGGING_HANDLERS_CONSOLE_LEVEL="WARNING",
        PREFECT_HOME=str(root / "prefect"),
        PREFECT_SERVER_ANALYTICS_ENABLED="false",
        DO_NOT_TRACK="1",
        # Schedule six months ahead so the daylight-saving change (last Sunday of March) is among them.
        PREFECT_SERVER_SERVICES_SCHEDULER_MIN_RUNS="6",
        PREFECT_SERVER_SERVICES_SCHEDULER_MAX_SCHEDULED_TIME="P200D",
        LEDGERBAND_HOME=str(root / "home"),
    )
    log = (root / "server.log").open("w")
    proc = subprocess.Popen(
        [str(BIN / "prefect"), "server", "start", "--host", "127.0.0.1", "--port", str(port)],
        env=env,
        stdout=log,
        stderr=subprocess.STDOUT,
        start_new_session=True,
    )
    started = time.monotonic()
    try:
        while True:
            try:
                if httpx.get(f"{api}/health", timeout=2).status_code == 200:
                    break
            except httpx.HTTPError:
                pass
            if proc.poll() is not None or time.monotonic() - started > 120:
                raise RuntimeError(
                    f"prefect server did not start: {(root / 'server.log').read_text()[-2000:]}"
                )
            time.sleep(1)
        env["PREFECT_API_URL"] = api
        yield {"api": api, "env": env, "root": root, "started_in": time.monotonic() - started}
    finally:
        os.killpg(proc.pid, signal.SIGTERM)
        try:
            proc.wait(timeout=30)
        except subprocess.TimeoutExpired:
            os.killpg(proc.pid, signal.SIGKILL)
            proc.wait()
        log.close()
    assert proc.poll() is not None  # stopped by its PID: nothing left listening


def _client(server):
    from prefect.client.orchestration import SyncPrefectClient

    return SyncPrefectClient(server["api"])


@pytest.fixture(scope="module")
def deployed(server):
    done = subprocess.run(
        [str(BIN / "ledgerband"), "deploy"], env=server["env"], capture_output=True, text=True, timeout=180
    )
    assert done.returncode == 0, done.stdout + done.stderr
    assert "cron '0 6 3 * *' in Europe/Dublin" in " ".join(done.stdout.split())
    with _client(server) as client:
        deployment = client.read_deployment_by_name("ledgerband-monthly-run/monthly")
    return deployment


def test_the_schedule_on_the_server_is_06_00_dublin_on_the_3rd(server, deployed):
    from prefect.client.schemas.filters import DeploymentFilter, DeploymentFilterId
    from prefect.client.schemas.sorting import FlowRunSort

    from ledgerband.tasks.ops.schedule import period_for_scheduled

    assert deployed.concurrency_limit == 1 or getattr(deployed, "global_concurrency_limit", None)
    runs = []
    deadline = time.monotonic() + 60
    while len(runs) < 6 and time.monotonic() < deadline:
        with _client(server) as client:
            runs = client.read_flow_runs(
                deployment_filter=DeploymentFilter(id=DeploymentFilterId(any_=[deployed.id])),
                sort=FlowRunSort.EXPECTED_START_TIME_ASC,
            )
        time.sleep(1)
    starts = [r.expected_start_time for r in runs if r.expected_start_time > datetime.now(UTC)][:6]
    assert len(starts) == 6
    local = [s.astimezone(DUBLIN) for s in starts]
    assert all((d.day, d.hour, d.minute) == (3, 6, 0) for d in local)
    # Winter (GMT) runs are at 06:00 UTC, summer (IST) runs at 05:00 UTC: the zone travels with the cron.
    utc_hours = {d.month: s.astimezone(UTC).hour for d, s in zip(local, starts, strict=True)}
    assert {utc_hours[m] for m in (12, 1, 2, 3) if m in utc_hours} == {6}
    assert {utc_hours[m] for m in (4, 5) if m in utc_hours} == {5}
    periods = [str(period_for_scheduled(s, "Europe/Dublin")) for s in starts]
    assert [p[-2:] for p in periods] == [f"{(d.month - 2) % 12 + 1:02d}" for d in local]


def test_a_worker_runs_a_scheduled_month_and_publishes(server, deployed):
    from ledgerband.tasks.demo.generator import generate
    from tests.leaks import demo_needles, leaks

    home = server["root"] / "home"
    files = generate(
        home / "landing",
        server["root"] / "answers.csv",
        customers=300,
        months=4,
        end_period="2026-10",
        seed=3,
    )
    from prefect.states import Scheduled

    scheduled = datetime(2026, 11, 3, 6, 0, tzinfo=DUBLIN)  # the November run, picked up late
    with _client(server) as client:
        flow_run = client.create_flow_run_from_deployment(
            deployed.id, state=Scheduled(scheduled_time=scheduled)
        )
    worker = subprocess.Popen(
        [str(BIN / "prefect"), "worker", "start", "--pool", "ledgerband-process", "--limit", "1"],
        env=server["env"],
        stdout=(server["root"] / "worker.log").open("w"),
        stderr=subprocess.STDOUT,
        start_new_session=True,
    )
    try:
        deadline = time.monotonic() + 420
        while time.monotonic() < deadline:
            with _client(server) as client:
                state = client.read_flow_run(flow_run.id).state
            if state.is_final():
                break
            time.sleep(3)
        # Read the logs before stopping the worker: the flow's process sends its last logs as it exits.
        messages = _logs_of(server, str(flow_run.id), "reader_copy ok")
    finally:
        os.killpg(worker.pid, signal.SIGTERM)
        worker.wait(timeout=60)
    with _client(server) as client:
        run = client.read_flow_run(flow_run.id)
    assert run.state.is_completed(), (server["root"] / "worker.log").read_text()[-3000:]
    assert run.name == "monthly-2026-10"  # the period came from the scheduled time
    # The run page shows every stage (INFO reaches the API), the run's summary and its decisions.
    for stage in ("ingest ok", "validate ok", "train ok", "accuracy_gate ok", "publish ok", "reader_copy ok"):
        assert any(stage in m for m in messages), (
            stage,
            len(messages),
            [m for m in messages if " ok in " in m],
        )
    artifacts = httpx.post(
        f"{server['api']}/artifacts/filter",
        json={"artifacts": {"flow_run_id": {"any_": [str(flow_run.id)]}}},
        timeout=10,
    ).json()
    assert {a["type"] for a in artifacts} >= {"markdown", "table"}
    assert any("ledgerband 2026-10: published" in (a.get("data") or "") for a in artifacts)
    # No customer id or posting amount in the run's logs (INFO included) or artifacts.
    ids, amounts = demo_needles(files.customers, files.extracts)
    texts = {"logs": "\n".join(messages), "artifacts": "\n".join(str(a.get("data")) for a in artifacts)}
    assert len(messages) > 20 and leaks(texts, ids, amounts) == {}

    import duckdb

    con = duckdb.connect(str(home / "published" / "ledgerband_published.duckdb"), read_only=True)
    assert con.execute("select period from snapshots where is_current").fetchall() == [("2026-10",)]
    con.close()


def _logs_of(server, flow_run_id: str, until: str) -> list[str]:
    messages, deadline = [], time.monotonic() + 120
    while time.monotonic() < deadline:  # the server persists logs in the background
        logs = httpx.post(
            f"{server['api']}/logs/filter",
            json={"logs": {"flow_run_id": {"any_": [flow_run_id]}}, "limit": 200},
            timeout=10,
        ).json()
        messages = [log["message"] for log in logs]
        if any(until in m for m in messages):
            break
        time.sleep(2)
    return messages


def test_a_run_started_by_hand_logs_every_stage_to_the_server(server, deployed):
    home = server["root"] / "home"
    done = subprocess.run(
        [str(BIN / "ledgerband"), "run", "--period", "2026-10", "--landing", str(home / "landing")],
        env=server["env"],
        capture_output=True,
        text=True,
        timeout=600,
    )
    assert done.returncode == 0, done.stdout[-2000:] + done.stderr[-2000:]
    flow_runs = httpx.post(
        f"{server['api']}/flow_runs/filter",
        json={"flow_runs": {"state": {"type": {"any_": ["COMPLETED"]}}}, "sort": "END_TIME_DESC", "limit": 1},
        timeout=10,
    ).json()
    assert flow_runs[0]["name"] == "monthly-2026-10"
    messages = _logs_of(server, flow_runs[0]["id"], "reader_copy ok")
    for stage in ("ingest ok", "validate ok", "train ok", "accuracy_gate ok", "publish ok", "reader_copy ok"):
        assert any(stage in m for m in messages), (
            stage,
            len(messages),
            [m for m in messages if " ok in " in m],
        )
