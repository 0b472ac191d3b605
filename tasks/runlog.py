"""ops.runs: one row per monthly run with each stage's status, timing and the gate figures.

The row is written when the run starts ('running') and rewritten after every stage, so a run that
dies half-way still shows how far it got.
"""

from __future__ import annotations

import json
import time
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from datetime import datetime
from pathlib import Path

from tasks.errors import GateStopped
from tasks.warehouse import apply_schema, open_warehouse


@dataclass
class RunLog:
    warehouse: Path
    run_id: str
    period: str
    started_at: datetime = field(default_factory=datetime.now)
    stages: list[dict] = field(default_factory=list)
    gate_figures: dict = field(default_factory=dict)
    status: str = "running"
    error: str | None = None

    def __post_init__(self) -> None:
        self._write(create_schema=True)

    @contextmanager
    def stage(self, name: str) -> Iterator[dict]:
        """Time one stage; an exception marks it failed (or stopped, for a gate) and propagates."""
        record = {"stage": name, "status": "running", "seconds": None, "detail": None}
        self.stages.append(record)
        t0 = time.perf_counter()
        try:
            yield record
        except GateStopped as exc:
            record["status"] = "stopped"
            record["detail"] = record["detail"] or str(exc)
            raise
        except Exception as exc:
            record["status"] = "failed"
            record["detail"] = f"{type(exc).__name__}: {exc}"
            raise
        else:
            record["status"] = "ok" if record["status"] == "running" else record["status"]
        finally:
            record["seconds"] = round(time.perf_counter() - t0, 3)
            self._write()

    def finish(self, status: str, error: str | None = None) -> None:
        self.status, self.error = status, error
        self._write(finished=True)

    def _write(self, create_schema: bool = False, finished: bool = False) -> None:
        with open_warehouse(self.warehouse) as con:
            if create_schema:
                apply_schema(con)
            con.execute("delete from ops.runs where run_id = ?", [self.run_id])
            con.execute(
                "insert into ops.runs values (?, ?, ?, ?, ?, ?, ?, ?)",
                [
                    self.run_id,
                    self.period,
                    self.started_at,
                    datetime.now() if finished else None,
                    self.status,
                    self.error,
                    json.dumps(self.stages, default=str),
                    json.dumps(self.gate_figures, default=str),
                ],
            )
