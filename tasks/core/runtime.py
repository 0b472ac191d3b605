"""Process environment for the libraries we drive. Called by the entry points (CLI), never on import.

Prefect reads PREFECT_HOME when it is first imported, so `configure_process_env()` must run before
`import prefect`: the CLI calls it first thing. Code that imports the flows itself (a Prefect worker, a
test session) brings its own Prefect configuration.
"""

from __future__ import annotations

import contextlib
import os
from pathlib import Path

# setdefault: an operator's explicit choice (e.g. PREFECT_API_URL of a real server) always wins.
QUIET_OFFLINE = {
    "DO_NOT_TRACK": "1",
    "PREFECT_SERVER_ANALYTICS_ENABLED": "false",
    # The temporary local API needs more than the default 20 s on a 2-core machine (STACK.md).
    "PREFECT_SERVER_EPHEMERAL_STARTUP_TIMEOUT_SECONDS": "90",
    # INFO reaches the Prefect API (the UI's run page shows every stage); the console shows warnings only.
    "PREFECT_LOGGING_LEVEL": "INFO",
    "PREFECT_LOGGING_HANDLERS_CONSOLE_LEVEL": "WARNING",
    "GX_ANALYTICS_ENABLED": "false",
    "TQDM_DISABLE": "1",
}


def configure_process_env() -> Path:
    """Point Prefect, GX and matplotlib at the state folder and keep them offline and quiet.

    Returns the state folder. Variables already set are left alone.
    """
    from ledgerband.tasks.core.settings import default_home

    for key, value in QUIET_OFFLINE.items():
        os.environ.setdefault(key, value)
    home = default_home().resolve()
    prefect_home = Path(os.environ.setdefault("PREFECT_HOME", str(home / "prefect")))
    prefect_home.mkdir(parents=True, exist_ok=True)
    os.environ.setdefault("MPLCONFIGDIR", str(home / "cache" / "matplotlib"))
    reap_orphaned_servers(prefect_home)
    return home


_SERVER_MARK = b"prefect.server.api.server:create_app"


def _proc(pid: int, name: str) -> bytes:
    try:
        return Path(f"/proc/{pid}/{name}").read_bytes()
    except OSError:
        return b""


def orphaned_servers(prefect_home: Path) -> list[int]:
    """Temporary Prefect API servers of this state folder whose run process is gone.

    A run without a configured Prefect server starts a temporary one as its child; a run killed
    abruptly (SIGKILL, os._exit) leaves it behind, re-parented to init. Such a server is recognised by its
    command line, by PREFECT_HOME naming this state folder's Prefect home, and by a parent that is init
    or no Python process. Linux only (/proc); elsewhere nothing is found.
    """
    wanted = b"PREFECT_HOME=" + str(Path(prefect_home).resolve()).encode()
    found = []
    for entry in Path("/proc").glob("[0-9]*"):
        pid = int(entry.name)
        if pid == os.getpid() or _SERVER_MARK not in _proc(pid, "cmdline"):
            continue
        if wanted not in _proc(pid, "environ").split(b"\0"):
            continue
        stat = _proc(pid, "stat")
        ppid = int(stat.rsplit(b")", 1)[1].split()[1]) if stat else 0
        if ppid <= 1 or b"python" not in _proc(ppid, "cmdline"):
            found.append(pid)
    return found


def reap_orphaned_servers(prefect_home: Path, wait_seconds: float = 5.0) -> list[int]:
    """End the orphaned temporary servers of this state folder (SIGTERM, then SIGKILL); returns their pids."""
    import signal
    import time

    pids = orphaned_servers(prefect_home)
    for pid in pids:
        with contextlib.suppress(ProcessLookupError, PermissionError):
            os.kill(pid, signal.SIGTERM)
    deadline = time.monotonic() + wait_seconds
    while time.monotonic() < deadline and any(Path(f"/proc/{pid}").exists() for pid in pids):
        time.sleep(0.1)
    for pid in pids:
        with contextlib.suppress(ProcessLookupError, PermissionError):
            os.kill(pid, signal.SIGKILL)
    return pids
