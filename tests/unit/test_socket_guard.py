"""The session's socket guard (tests/conftest.py) is on: nothing in a test reaches past 127.0.0.1."""

import socket
import threading

import pytest


def test_a_connection_off_this_machine_is_refused():
    with socket.socket() as s, pytest.raises(ConnectionRefusedError, match="test socket guard"):
        s.connect(("192.0.2.1", 80))  # TEST-NET-1 (RFC 5737): documentation addresses, never routed
    with (
        socket.socket(socket.AF_INET6) as s,
        pytest.raises(ConnectionRefusedError, match="test socket guard"),
    ):
        s.connect_ex(("2001:db8::1", 80, 0, 0))  # RFC 3849 documentation prefix


def test_loopback_still_works():
    server = socket.create_server(("127.0.0.1", 0))
    port = server.getsockname()[1]
    accepted = threading.Thread(target=lambda: server.accept()[0].close(), daemon=True)
    accepted.start()
    with socket.create_connection(("127.0.0.1", port), timeout=5):
        pass
    accepted.join(5)
    server.close()


def test_a_python_subprocess_started_by_a_test_is_guarded_too():
    import subprocess
    import sys

    code = (
        "import socket\n"
        "try:\n"
        "    socket.create_connection(('192.0.2.1', 80), timeout=5)\n"  # TEST-NET-1 (RFC 5737)
        "except ConnectionRefusedError as exc:\n"
        "    print(exc)\n"
    )
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=60)
    assert "test socket guard" in done.stdout, done.stdout + done.stderr
