"""Process environment for the libraries we drive. Called by the entry points (CLI), never on import.

Prefect reads PREFECT_HOME when it is first imported, so `configure_process_env()` must run before
`import prefect`: the CLI calls it first thing. Code that imports the flows itself (a Prefect worker, a
test session) brings its own Prefect configuration.
"""

from __future__ import annotations

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
    from ledgerband.tasks.settings import default_home

    for key, value in QUIET_OFFLINE.items():
        os.environ.setdefault(key, value)
    home = default_home().resolve()
    prefect_home = Path(os.environ.setdefault("PREFECT_HOME", str(home / "prefect")))
    prefect_home.mkdir(parents=True, exist_ok=True)
    os.environ.setdefault("MPLCONFIGDIR", str(home / "cache" / "matplotlib"))
    return home
