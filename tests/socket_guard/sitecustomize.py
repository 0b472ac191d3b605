"""The test session's socket guard, also loaded by every Python subprocess a test starts.

tests/conftest.py installs it in the test process and puts this folder first on PYTHONPATH with
TESTS_SOCKET_GUARD=1, so Python imports this file as `sitecustomize` when any subprocess starts
(the CLI runs of the crash tests, the real Prefect server and its worker, the wheel's CLI). Not a package:
a folder on the path only. Programs that are not Python (the browser of the report test) are not covered.
"""

from __future__ import annotations

import os

ENV = "TESTS_SOCKET_GUARD"


def install() -> None:
    """No test reaches past this machine: an IP connection anywhere but the loopback fails loudly.

    Every service a test needs (Prefect API, SMTP, HTTP sinks) listens on 127.0.0.1; a library that tried
    to phone home (analytics, update checks, a hub download) would fail the test that caused it. Unix
    sockets are untouched.
    """
    import ipaddress
    import socket

    if getattr(socket.socket.connect, "_test_socket_guard", False):
        return
    real_connect, real_connect_ex = socket.socket.connect, socket.socket.connect_ex

    def _check(sock: socket.socket, address) -> None:
        if sock.family not in (socket.AF_INET, socket.AF_INET6):
            return
        host = address[0]
        try:
            loopback = host == "localhost" or ipaddress.ip_address(host).is_loopback
        except ValueError:
            loopback = False
        if not loopback:
            raise ConnectionRefusedError(
                f"test socket guard: a connection to {address!r} was attempted; tests stay on 127.0.0.1"
            )

    def connect(self, address):
        _check(self, address)
        return real_connect(self, address)

    def connect_ex(self, address):
        _check(self, address)
        return real_connect_ex(self, address)

    connect._test_socket_guard = True
    socket.socket.connect = connect
    socket.socket.connect_ex = connect_ex


if os.environ.get(ENV) == "1":
    install()
