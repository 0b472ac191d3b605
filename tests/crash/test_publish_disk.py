"""Publishing when the disk is full or the published folder is read-only: a clear error, what readers had
stays, nothing half-written remains.

Each case copies the clean run's state folder and runs `disk_probe.py` in a private mount namespace
(`unshare --mount --map-root-user`, util-linux): a tmpfs just larger than the folder's content, filled
to the last byte, or a read-only bind mount. Marked `crash` with the kill tests. Where user namespaces
are not allowed the cases are skipped, saying so.
"""

from __future__ import annotations

import json
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

PROBE = Path(__file__).with_name("disk_probe.py")


def _namespaces_allowed() -> bool:
    try:
        done = subprocess.run(
            ["unshare", "--mount", "--map-root-user", "true"], capture_output=True, timeout=30
        )
    except (OSError, subprocess.SubprocessError):
        return False
    return done.returncode == 0


needs_namespaces = pytest.mark.skipif(
    not _namespaces_allowed(), reason="unshare --mount --map-root-user is not permitted on this machine"
)


def _probe(clean_home: Path, tmp_path: Path, scenario: str) -> dict:
    home = tmp_path / "home"
    shutil.copytree(clean_home, home, ignore=shutil.ignore_patterns("prefect"))
    out = tmp_path / "probe.json"
    done = subprocess.run(
        ["unshare", "--mount", "--map-root-user", sys.executable, str(PROBE), str(home), scenario, str(out)],
        capture_output=True,
        text=True,
        timeout=300,
    )
    assert done.returncode == 0, done.stdout + done.stderr
    return json.loads(out.read_text())


@needs_namespaces
def test_a_full_published_folder_refuses_clearly_and_keeps_what_readers_had(clean_home, tmp_path):
    seen = _probe(clean_home, tmp_path, "full")
    readers, parquet = seen["errors"]["readers_copy"], seen["errors"]["parquet"]
    # errno 28, ENOSPC (POSIX): the operating system's own words are passed on, with the file named.
    assert readers and "No space left on device" in readers and "ledgerband_published.duckdb" in readers
    assert "previous copy is unchanged" in readers
    assert parquet and "No space left on device" in parquet and "Parquet income_bands" in parquet
    assert seen["files_unchanged"] and seen["reader_tables_unchanged"]
    assert seen["left_behind"] == []


@needs_namespaces
def test_a_read_only_published_folder_refuses_clearly_and_keeps_what_readers_had(clean_home, tmp_path):
    seen = _probe(clean_home, tmp_path, "read_only")
    for error in seen["errors"].values():
        assert error and "Read-only file system" in error  # errno 30, EROFS (POSIX)
    assert seen["files_unchanged"] and seen["reader_tables_unchanged"]
    assert seen["left_behind"] == []


@needs_namespaces
def test_a_publish_transaction_on_a_full_disk_rolls_back_whole(clean_home, tmp_path):
    seen = _probe(clean_home, tmp_path, "warehouse")
    assert seen["error"] and "No space left on device" in seen["error"]
    assert seen["current"] == [seen["previous"]]  # the previous snapshot stays current
    assert seen["new_run_rows"] == 0  # nothing of the failed snapshot remains
