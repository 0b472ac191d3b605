"""Test set-up: a throw-away state folder for the whole session, set before anything imports Prefect."""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

_SESSION_HOME = Path(tempfile.mkdtemp(prefix="ledgerband-test-"))
os.environ["LEDGERBAND_HOME"] = str(_SESSION_HOME)
os.environ["PREFECT_HOME"] = str(_SESSION_HOME / "prefect")
os.environ.setdefault("PREFECT_LOGGING_LEVEL", "WARNING")
# Tests read the defaults in code (an empty settings file), not an operator's ledgerband.toml or environment.
(_SESSION_HOME / "ledgerband.toml").write_text("# empty: the defaults in code apply\n")
os.environ["LEDGERBAND_CONFIG"] = str(_SESSION_HOME / "ledgerband.toml")
for _name in list(os.environ):
    if _name.startswith("LEDGERBAND_") and _name not in ("LEDGERBAND_HOME", "LEDGERBAND_CONFIG"):
        del os.environ[_name]

import duckdb  # noqa: E402
import pytest  # noqa: E402

from ledgerband.tasks.core.runtime import configure_process_env  # noqa: E402
from ledgerband.tasks.core.settings import Settings, get_settings  # noqa: E402
from ledgerband.tasks.core.warehouse import apply_schema  # noqa: E402

configure_process_env()  # the test session is an entry point, like the CLI

FIXTURES = Path(__file__).parent / "fixtures"


def _guard_sockets() -> None:
    """The socket guard in this process and, through PYTHONPATH, in every Python subprocess."""
    import importlib.util

    folder = Path(__file__).parent / "socket_guard"
    spec = importlib.util.spec_from_file_location("ledgerband_test_socket_guard", folder / "sitecustomize.py")
    guard = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(guard)
    guard.install()
    os.environ[guard.ENV] = "1"
    os.environ["PYTHONPATH"] = os.pathsep.join(p for p in (str(folder), os.environ.get("PYTHONPATH")) if p)


_guard_sockets()


@pytest.fixture
def settings(tmp_path: Path) -> Settings:
    """Default settings with the state folder in this test's tmp_path."""
    return Settings(home=tmp_path / "state")


@pytest.fixture
def con() -> duckdb.DuckDBPyConnection:
    """An in-memory warehouse with the full schema."""
    c = duckdb.connect()
    apply_schema(c)
    yield c
    c.close()


@pytest.fixture(autouse=True)
def _fresh_settings_cache():
    get_settings.cache_clear()
    yield
    get_settings.cache_clear()


@pytest.fixture(scope="session")
def prefect_api():
    """One temporary Prefect API for every flow test in the session (starting one takes ~15 s)."""
    from prefect.testing.utilities import prefect_test_harness

    with prefect_test_harness(server_startup_timeout=120):
        yield


@pytest.fixture
def http_sink():
    """A real HTTP server on 127.0.0.1 that keeps every JSON body POSTed to it (a webhook receiver)."""
    import json as _json
    import threading
    from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer

    received: list[dict] = []

    class Handler(BaseHTTPRequestHandler):
        def do_POST(self):  # the http.server API
            body = self.rfile.read(int(self.headers.get("Content-Length", 0)))
            received.append({"path": self.path, "body": _json.loads(body or b"{}")})
            self.send_response(200)
            self.end_headers()

        def log_message(self, *args):  # keep the test output clean
            pass

    server = ThreadingHTTPServer(("127.0.0.1", 0), Handler)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    try:
        yield f"127.0.0.1:{server.server_address[1]}", received
    finally:
        server.shutdown()
        server.server_close()


@pytest.fixture
def smtp_sink():
    """A real SMTP server (aiosmtpd) on 127.0.0.1 that keeps every message it is handed."""
    import socket

    from aiosmtpd.controller import Controller

    received: list[dict] = []

    class Handler:
        async def handle_DATA(self, server, session, envelope):  # the aiosmtpd API
            received.append(
                {"from": envelope.mail_from, "to": envelope.rcpt_tos, "content": envelope.content.decode()}
            )
            return "250 OK"

    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    controller = Controller(Handler(), hostname="127.0.0.1", port=port)
    controller.start()
    try:
        yield f"127.0.0.1:{port}", received
    finally:
        controller.stop()


# Each test folder is a marker of its own, so a marker and its folder can never disagree:
# `make test` (the fast loop) runs -m "unit or sql or reference"; CI runs every folder but bench.
SUITES = ("unit", "sql", "reference", "integration", "package", "crash", "scale", "bench")


@pytest.hookimpl(tryfirst=True)
def pytest_collection_modifyitems(config, items):
    root = Path(__file__).parent
    for item in items:
        parts = Path(str(item.path)).relative_to(root).parts
        if len(parts) > 1 and parts[0] in SUITES:
            item.add_marker(getattr(pytest.mark, parts[0]))
