"""The crash suite's shared bank: demo extracts, and one clean run of the month through the CLI."""

from __future__ import annotations

import os
import subprocess
import sys
import time
from pathlib import Path

import pytest

from ledgerband.tasks.faults import FAULT_ENV

PERIOD = "2026-10"
# A small bank and a quick model comparison: what is under test is crash safety, not accuracy.
CONFIG = """
[accuracy]
min_labelled_customers = 50
min_mae_skill = 0.0
min_band_skill = 0.0
coverage_tolerance = 0.5
[train]
candidates = ["linear_regression", "ridge"]
cv_folds = 3
cv_repeats = 1
"""


@pytest.fixture(scope="session")
def landing(tmp_path_factory):
    from ledgerband.tasks.demo.generator import generate

    root = tmp_path_factory.mktemp("crash-landing")
    files = generate(root / "landing", root / "answers.parquet", customers=600, months=4, seed=5)
    (root / "ledgerband.toml").write_text(CONFIG)
    return files.landing_dir


def run_cli(home: Path, landing: Path, fault: str | None = None) -> subprocess.CompletedProcess:
    env = {k: v for k, v in os.environ.items() if not k.startswith(("PREFECT_API_URL", FAULT_ENV))}
    env.update(
        LEDGERBAND_HOME=str(home),
        LEDGERBAND_CONFIG=str(landing.parent / "ledgerband.toml"),
        PREFECT_HOME=str(home / "prefect"),
    )
    if fault:
        env[FAULT_ENV] = fault
    command = [
        sys.executable,
        "-m",
        "ledgerband.flows.cli",
        "run",
        "--period",
        PERIOD,
        "--landing",
        str(landing),
    ]
    # Output to a file, not a pipe: a killed run's orphaned server would hold a pipe open (and the test
    # would wait on it) until it is reaped.
    home.mkdir(parents=True, exist_ok=True)
    log = home.parent / f"{home.name}-{fault or 'run'}-{time.monotonic_ns()}.log"
    with log.open("w") as out:
        done = subprocess.run(command, env=env, stdout=out, stderr=subprocess.STDOUT, timeout=600)
    return subprocess.CompletedProcess(command, done.returncode, log.read_text(), "")


@pytest.fixture(scope="session")
def clean_home(tmp_path_factory, landing) -> Path:
    """A state folder after one uninterrupted run of the month (tests copy it before changing anything)."""
    home = tmp_path_factory.mktemp("crash-clean") / "home"
    result = run_cli(home, landing)
    assert result.returncode == 0, result.stdout + result.stderr
    return home
