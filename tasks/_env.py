"""Process environment for the libraries we drive: set before any of them is imported."""

from __future__ import annotations

import os
from pathlib import Path

# setdefault: an operator's explicit choice (e.g. PREFECT_API_URL of a real server) always wins.
_QUIET_OFFLINE = {
    "DO_NOT_TRACK": "1",
    "PREFECT_SERVER_ANALYTICS_ENABLED": "false",
    # The temporary local API needs more than the default 20 s on a 2-core machine (STACK.md).
    "PREFECT_SERVER_EPHEMERAL_STARTUP_TIMEOUT_SECONDS": "90",
    "PREFECT_LOGGING_LEVEL": "WARNING",
    "GX_ANALYTICS_ENABLED": "false",
    "TQDM_DISABLE": "1",
}


def state_home() -> Path:
    """Where all runtime state lives; `LEDGERBAND_HOME` overrides the git-ignored default."""
    from tasks.settings import _default_home

    return _default_home().resolve()


def configure_process_env() -> None:
    for key, value in _QUIET_OFFLINE.items():
        os.environ.setdefault(key, value)
    home = state_home()
    prefect_home = Path(os.environ.setdefault("PREFECT_HOME", str(home / "prefect")))
    prefect_home.mkdir(parents=True, exist_ok=True)
    os.environ.setdefault("MPLCONFIGDIR", str(home / "cache" / "matplotlib"))
