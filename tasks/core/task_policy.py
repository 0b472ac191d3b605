"""Retry policy: only I/O that may succeed a moment later is retried; validation, training, gates never."""

from __future__ import annotations

from typing import Any

# Errors that a retry cannot mend: the file is not there or not ours to read.
_PERMANENT = (FileNotFoundError, IsADirectoryError, NotADirectoryError, PermissionError)


def retry_on_io(task: Any, task_run: Any, state: Any) -> bool:
    """Prefect retry_condition_fn: retry a failed task only when it failed on transient I/O."""
    exc = state.data if isinstance(state.data, BaseException) else None
    return isinstance(exc, OSError) and not isinstance(exc, _PERMANENT)


def minutes_setting(name: str, default: float) -> float:
    """A timeout from settings.schedule, in seconds, read when the tasks are defined (import time);
    the default when the settings cannot be read yet (the CLI reports a broken configuration itself)."""
    try:
        from ledgerband.tasks.core.settings import get_settings

        return float(getattr(get_settings().schedule, name)) * 60
    except Exception:
        return default * 60


# Keyword arguments for @task on stages that read landing files or write the published copy/report.
IO_RETRIES: dict[str, Any] = {
    "retries": 2,
    "retry_delay_seconds": [5, 30],
    "retry_condition_fn": retry_on_io,
    "timeout_seconds": minutes_setting("io_timeout_minutes", 60),
}
