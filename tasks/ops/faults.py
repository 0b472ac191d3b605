"""Fault injection for the crash tests: end the process abruptly at a named point. Off by default.

FOR TESTS ONLY. When the environment variable LEDGERBAND_FAULT_AT names a point, the process calls
`os._exit(FAULT_EXIT_CODE)` when it reaches it: no `finally`, no `atexit`, no flush, the same as SIGKILL
or a power cut as far as the warehouse and the files are concerned. tests/crash/ runs the flow in a
subprocess with each point set, then reruns it and compares with a clean run.
"""

from __future__ import annotations

import os

FAULT_ENV = "LEDGERBAND_FAULT_AT"
FAULT_EXIT_CODE = 86
POINTS = {
    "mid_load": "inside an extract's load transaction: records inserted, not committed",
    "after_load": "after ingest, before validation",
    "mid_features": "after the staging layer is built, before the intermediate layer",
    "after_train": "after training, before the accuracy gate and publish",
    "mid_publish": "readers' copy written beside the old one, before it is renamed over it",
    "after_swap": "readers' copy swapped in and Parquet written, before the run's record says published",
}


def checkpoint(point: str) -> None:
    """End the process here if LEDGERBAND_FAULT_AT names this point."""
    if point not in POINTS:  # a typo in code must not silently disable a test's crash
        raise ValueError(f"unknown fault point {point!r}")
    if os.environ.get(FAULT_ENV) == point:
        os._exit(FAULT_EXIT_CODE)
