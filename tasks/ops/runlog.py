"""ops.runs: one row per monthly run with each stage's status, timing and the gate decisions.

The row is written when the run starts ('running') and rewritten after every stage, so a run that
dies half-way still shows how far it got. The gate figures are read back from published.decisions (what
`enforce` recorded), so there is one record of each decision.
"""

from __future__ import annotations

import json
import logging
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from datetime import datetime
from pathlib import Path
from typing import Any, TypeVar

from ledgerband.tasks.core.context import RunContext
from ledgerband.tasks.core.errors import GateStopped
from ledgerband.tasks.core.queries import run_query
from ledgerband.tasks.core.warehouse import apply_schema, open_warehouse, resource_error
from ledgerband.tasks.gates import decisions_of_run

T = TypeVar("T")

RUNNING = "running"
PUBLISHED = "published"
FAILED = "failed"
CRASHED = "crashed"  # its process ended without finishing the run (killed, machine restarted)
# and GateStopped.run_status: 'withheld' (accuracy) or 'stopped' (quality)


def _log_stage(ctx: RunContext, record: dict) -> None:
    """One INFO line per stage in the Prefect run log (what the UI shows), a WARNING when it did not end ok."""
    try:
        from prefect import get_run_logger

        logger = get_run_logger()
    except Exception:  # outside a flow run there is no run log
        return
    level = logging.INFO if record["status"] == "ok" else logging.WARNING
    detail = json.dumps(record["detail"], default=str) if record["detail"] is not None else ""
    logger.log(
        level,
        "%s %s: %s %s in %.1f s %s",
        ctx.period,
        ctx.run_id[:8],
        record["stage"],
        record["status"],
        record["seconds"],
        detail[:2000],
    )


def _reset_peak_rss() -> None:
    """Start a new high-water mark of this process's resident memory (Linux: `echo 5 > clear_refs`,
    proc(5)), so each stage records its own peak; elsewhere the peak is since the process started."""
    try:
        Path("/proc/self/clear_refs").write_text("5")
    except OSError:
        pass


def _peak_rss_mb() -> float | None:
    """The process's peak resident memory since the last reset, in MB (VmHWM, proc(5)); None off Linux."""
    try:
        for line in Path("/proc/self/status").read_text().splitlines():
            if line.startswith("VmHWM:"):
                return round(int(line.split()[1]) / 1024, 1)
    except OSError:
        pass
    return None


@dataclass
class RunLog:
    ctx: RunContext
    stages: list[dict] = field(default_factory=list)
    status: str = RUNNING
    error: str | None = None

    def __post_init__(self) -> None:
        self._write(create_schema=True, mark_crashed=True)

    @contextmanager
    def stage(self, name: str) -> Iterator[dict]:
        """Time one stage; an exception marks it failed (or stopped, for a gate) and propagates."""
        record = {"stage": name, "status": "running", "seconds": None, "detail": None, "peak_rss_mb": None}
        self.stages.append(record)
        _reset_peak_rss()
        t0 = time.perf_counter()
        try:
            yield record
        except GateStopped as exc:
            record["status"] = "stopped"
            record["detail"] = record["detail"] or str(exc)
            raise
        except Exception as exc:
            record["status"] = "failed"
            advice = resource_error(exc, self.ctx.settings.scale, self.ctx.warehouse, name)
            if advice is not None:  # out of memory or spill space: say which setting to change
                record["detail"] = f"{type(exc).__name__}: {advice}"
                raise advice from exc
            record["detail"] = f"{type(exc).__name__}: {exc}"
            raise
        else:
            record["status"] = "ok" if record["status"] == "running" else record["status"]
        finally:
            record["seconds"] = round(time.perf_counter() - t0, 3)
            record["peak_rss_mb"] = _peak_rss_mb()
            self._write()
            _log_stage(self.ctx, record)

    def run(self, name: str, fn: Callable[..., T], *args: Any, detail: Callable[[T], Any] | None = None) -> T:
        """One stage as one line: call `fn(*args)` inside `stage(name)`; `detail` summarises its result."""
        with self.stage(name) as record:
            result = fn(*args)
            record["detail"] = detail(result) if detail else None
            return result

    def finish(self, status: str, error: str | None = None) -> None:
        self.status, self.error = status, error
        self._write(finished=True)

    def _write(self, create_schema: bool = False, finished: bool = False, mark_crashed: bool = False) -> None:
        with open_warehouse(self.ctx.warehouse, self.ctx.settings.scale) as con:
            if create_schema:
                apply_schema(con)
            if mark_crashed:
                mark_crashed_runs(con, self.ctx.run_id)
            gates = decisions_of_run(con, self.ctx.run_id)
            con.execute("delete from ops.runs where run_id = ?", [self.ctx.run_id])
            con.execute(
                "insert into ops.runs values (?, ?, ?, ?, ?, ?, ?, ?)",
                [
                    self.ctx.run_id,
                    str(self.ctx.period),
                    self.ctx.started_at,
                    datetime.now() if finished else None,
                    self.status,
                    self.error,
                    json.dumps(self.stages, default=str),
                    json.dumps(gates, default=str),
                ],
            )


CRASH_NOTE = "its process ended without finishing the run (killed or crashed)"


def status_now(status: str, error: str | None, lock_free: bool) -> tuple[str, str | None]:
    """A run row's status as it stands now: the one rule for telling a crashed run.

    A row still 'running' when no process holds the run lock belongs to a process that ended without
    finishing (SIGKILL, power loss, OOM killer). `status` reads it this way; the next run to take the lock
    writes it down (`mark_crashed_runs`).
    """
    if status == RUNNING and lock_free:
        return CRASHED, error or f"{CRASH_NOTE}; the next run records it as crashed"
    return status, error


def mark_crashed_runs(con, current_run_id: str) -> int:
    """Mark every other run still 'running' as crashed; returns how many.

    Called by a run that holds the run lock: only one run holds it, so any other row still 'running'
    is a crash by the rule of `status_now`.
    """
    now = datetime.now()
    rows = run_query(
        con,
        "ops",
        "mark_crashed_runs",
        crashed=CRASHED,
        finished_at=now,
        note=f"{CRASH_NOTE}; found by run {current_run_id} at {now:%Y-%m-%d %H:%M:%S}",
        running=RUNNING,
        current_run_id=current_run_id,
    ).fetchall()
    return len(rows)
