"""The crash suite's shared bank: demo extracts, and one clean run of the month through the CLI."""

from __future__ import annotations

import subprocess
from pathlib import Path

import pytest

from ledgerband.tasks.ops.faults import FAULT_ENV
from tests.monthly_cli import run_month

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
    return run_month(home, landing, PERIOD, {FAULT_ENV: fault} if fault else None, label=fault or "run")


@pytest.fixture(scope="session")
def clean_home(tmp_path_factory, landing) -> Path:
    """A state folder after one uninterrupted run of the month (tests copy it before changing anything)."""
    home = tmp_path_factory.mktemp("crash-clean") / "home"
    result = run_cli(home, landing)
    assert result.returncode == 0, result.stdout + result.stderr
    return home
