"""One run at a time per state folder.

A run holds an exclusive `fcntl.flock` on `<home>/run.lock` for its whole life and writes who it is
(period, process id, host, start time, UTC) into the file. A second run is refused up front with
`RunLocked` (exit code 4, no owner alert: nothing failed). The operating system releases the lock when
the holding process ends, however it ends, so a crashed run never leaves a lock behind; the file's text
is then only a record of the last holder. POSIX only (Linux workers).
"""

from __future__ import annotations

import fcntl
import json
import os
import socket
from collections.abc import Iterator
from contextlib import contextmanager
from datetime import UTC, datetime
from pathlib import Path

from ledgerband.tasks.core.errors import LedgerbandError

LOCK_NAME = "run.lock"


class RunLocked(LedgerbandError):
    """Another run holds the state folder."""

    exit_code = 4
    MARK = "run lock:"  # the owners' alert hook recognises a refused start by this prefix

    def __init__(self, path: Path, holder: dict):
        self.holder = holder
        who = (
            f"period {holder.get('period', '?')}, process {holder.get('pid', '?')} on {holder.get('host', '?')}, "
            f"since {holder.get('started_at', '?')}"
            if holder
            else "a process that has not written its name yet"
        )
        super().__init__(
            f"{self.MARK} another run holds {path} ({who}); this run did not start. Wait for it to finish "
            "(`ledgerband status` lists runs); a lock is released when its process ends, even by a crash."
        )


def _holder(path: Path) -> dict:
    try:
        return json.loads(path.read_text() or "{}")
    except (OSError, ValueError):
        return {}


@contextmanager
def run_lock(home: Path, period: str) -> Iterator[dict]:
    """Hold the state folder's run lock for the block; raise RunLocked when another process holds it."""
    home.mkdir(parents=True, exist_ok=True)
    path = home / LOCK_NAME
    fd = os.open(path, os.O_RDWR | os.O_CREAT, 0o644)
    try:
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            raise RunLocked(path, _holder(path)) from None
        holder = {
            "period": period,
            "pid": os.getpid(),
            "host": socket.gethostname(),
            "started_at": datetime.now(UTC).isoformat(timespec="seconds"),
        }
        os.ftruncate(fd, 0)
        os.pwrite(fd, json.dumps(holder).encode(), 0)
        os.fsync(fd)
        try:
            yield holder
        finally:
            fcntl.flock(fd, fcntl.LOCK_UN)
    finally:
        os.close(fd)


def lock_is_free(home: Path) -> bool:
    """True when no process holds the state folder's run lock (tried without waiting, released at once)."""
    path = home / LOCK_NAME
    if not path.exists():
        return True
    fd = os.open(path, os.O_RDWR)
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except BlockingIOError:
        return False
    else:
        fcntl.flock(fd, fcntl.LOCK_UN)
        return True
    finally:
        os.close(fd)
