"""The built wheel runs with no checkout: what a Prefect worker installs must carry everything it reads.

Builds a wheel from a copy of the source tree (the working tree is never written), installs it without
dependencies into a fresh virtual environment outside the checkout — the dependencies come from the test
environment through a path file, since their pins are what `pyproject.toml` already installs — and runs
`ledgerband demo` there on a small bank. It must publish.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import sysconfig
import zipfile
from pathlib import Path

import pytest

REPO = Path(__file__).parents[2]
SOURCES = ("pyproject.toml", "README.md", "flows", "tasks", "warehouse", "expectations")


@pytest.fixture(scope="module")
def wheel(tmp_path_factory) -> Path:
    src = tmp_path_factory.mktemp("src")
    for name in SOURCES:
        if (REPO / name).is_dir():
            shutil.copytree(REPO / name, src / name, ignore=shutil.ignore_patterns("__pycache__"))
        else:
            shutil.copy2(REPO / name, src / name)
    out = tmp_path_factory.mktemp("dist")
    subprocess.run(
        [
            sys.executable,
            "-m",
            "pip",
            "wheel",
            "--no-deps",
            "--no-build-isolation",
            "-q",
            "-w",
            str(out),
            str(src),
        ],
        check=True,
        timeout=300,
    )
    [whl] = out.glob("ledgerband-*.whl")
    return whl


def test_the_wheel_carries_sql_suites_and_template_under_one_import_name(wheel):
    names = zipfile.ZipFile(wheel).namelist()
    top = {n.split("/")[0] for n in names if not n.split("/")[0].endswith(".dist-info")}
    assert top == {"ledgerband"}  # no generic top-level `flows` or `tasks` in site-packages
    for needed in (
        "ledgerband/warehouse/schema.sql",
        "ledgerband/warehouse/sql/staging/transactions.sql",
        "ledgerband/warehouse/sql/intermediate/salary_streams.sql",
        "ledgerband/warehouse/sql/features/customer.sql",
        "ledgerband/warehouse/sql/published/income_bands.sql",
        "ledgerband/expectations/ledger_lines.json",
        "ledgerband/expectations/customer_features.json",
        "ledgerband/tasks/report/templates/run_report.html.j2",
    ):
        assert needed in names, needed
    # Every query file the modules load by name (warehouse/sql/queries/<area>/<name>.sql).
    queries = sorted((REPO / "warehouse" / "sql" / "queries").glob("*/*.sql"))
    assert queries
    missing = [p for p in queries if f"ledgerband/{p.relative_to(REPO).as_posix()}" not in names]
    assert not missing, f"query files left out of the wheel: {missing}"


def test_the_installed_wheel_runs_the_demo_outside_the_checkout(wheel, tmp_path):
    venv = tmp_path / "venv"
    subprocess.run([sys.executable, "-m", "venv", str(venv)], check=True, timeout=300)
    bin_dir = venv / "bin"
    site = Path(
        subprocess.run(
            [str(bin_dir / "python"), "-c", "import sysconfig; print(sysconfig.get_paths()['purelib'])"],
            check=True,
            capture_output=True,
            text=True,
        ).stdout.strip()
    )
    # Dependencies: the test environment's site-packages, appended after the venv's own (a plain path
    # line, so the checkout's editable-install hook in there is not run). The wheel itself is installed
    # for real, console script included.
    (site / "test-dependencies.pth").write_text(sysconfig.get_paths()["purelib"] + "\n")
    subprocess.run(
        [str(bin_dir / "python"), "-m", "pip", "install", "-q", "--no-deps", "--no-index", str(wheel)],
        check=True,
        timeout=300,
    )

    workdir = tmp_path / "elsewhere"
    workdir.mkdir()
    env = {k: v for k, v in os.environ.items() if not k.startswith(("PREFECT_", "LEDGERBAND_", "PYTHON"))}
    env["LEDGERBAND_HOME"] = str(tmp_path / "state")

    def run(*args: str, timeout: int = 600) -> subprocess.CompletedProcess:
        return subprocess.run(
            [str(bin_dir / "ledgerband"), *args],
            cwd=workdir,
            env=env,
            capture_output=True,
            text=True,
            timeout=timeout,
        )

    where = subprocess.run(
        [str(bin_dir / "python"), "-c", "import ledgerband.tasks as t; print(t.__file__)"],
        cwd=workdir,
        env=env,
        capture_output=True,
        text=True,
        check=True,
    ).stdout.strip()
    assert where.startswith(str(site)), f"ledgerband imported from {where}, not from the installed wheel"

    version = run("--version")
    assert version.returncode == 0 and version.stdout.strip() == "ledgerband 0.1.0", version.stderr

    demo = run("demo", "--customers", "400")
    assert demo.returncode == 0, demo.stdout[-3000:] + demo.stderr[-3000:]
    assert "Accuracy gate passed" in demo.stdout
    state = tmp_path / "state"
    assert (state / "published" / "ledgerband_published.duckdb").is_file()
    assert (state / "reports" / "2026-10" / "index.html").is_file()
    assert not (workdir / ".ledgerband").exists()  # state went where LEDGERBAND_HOME said
