"""Publishing onto a full or read-only disk, run inside a private mount namespace (`unshare`).

Run by tests/crash/test_publish_disk.py as `unshare --mount --map-root-user python disk_probe.py HOME
SCENARIO OUT`: mounts a small tmpfs (or a read-only bind mount) over one folder of the state folder HOME,
fills it, tries the publish step, and writes what it saw to OUT as JSON. The mounts end with the process;
the test asserts on the JSON.
"""

from __future__ import annotations

import hashlib
import json
import shutil
import subprocess
import sys
import uuid
from pathlib import Path

import duckdb

from ledgerband.tasks.core.context import RunContext
from ledgerband.tasks.core.errors import PublishWriteError
from ledgerband.tasks.core.settings import Settings
from ledgerband.tasks.publish.snapshot import (
    READER_TABLES,
    export_reader_copy,
    publish_snapshot,
    write_parquet,
)


def _files(folder: Path) -> dict[str, str]:
    """Every file under `folder` and the SHA-256 of its bytes."""
    return {
        str(p.relative_to(folder)): hashlib.sha256(p.read_bytes()).hexdigest()
        for p in sorted(folder.rglob("*"))
        if p.is_file() and p.name != "filler"
    }


def _mount_tmpfs_over(folder: Path) -> None:
    """A tmpfs a little larger than `folder`'s content, the content copied in, the rest filled."""
    aside = folder.with_name(folder.name + ".aside")
    shutil.copytree(folder, aside)
    size = sum(p.stat().st_size for p in aside.rglob("*") if p.is_file()) + (1 << 20)
    subprocess.run(["mount", "-t", "tmpfs", "-o", f"size={size}", "tmpfs", str(folder)], check=True)
    shutil.copytree(aside, folder, dirs_exist_ok=True)
    _fill(folder)


def _fill(folder: Path) -> None:
    with (folder / "filler").open("wb", buffering=0) as f:  # unbuffered: nothing is left to flush
        try:
            while True:
                f.write(b"\0" * 65536)
        except OSError:  # ENOSPC: the folder is full to the last page
            pass


def _read_only(folder: Path) -> None:
    subprocess.run(["mount", "--bind", str(folder), str(folder)], check=True)
    subprocess.run(["mount", "-o", "remount,ro,bind", str(folder)], check=True)


def _attempt(fn, *args) -> str | None:
    """The error's text when `fn` refuses as it should (PublishWriteError), None when it succeeded."""
    try:
        fn(*args)
    except PublishWriteError as exc:
        return str(exc)
    return None


def _reader_tables(path: Path) -> dict[str, int]:
    con = duckdb.connect(str(path), read_only=True)
    try:
        return {t: con.execute(f"select count(*) from {t}").fetchall()[0][0] for t in READER_TABLES}
    finally:
        con.close()


def published_folder(home: Path, read_only: bool) -> dict:
    """The readers' copy and Parquet onto a full (or read-only) published folder."""
    s = Settings(home=home)
    folder = s.published_path.parent
    before, tables_before = _files(folder), _reader_tables(s.published_path)
    (_read_only if read_only else _mount_tmpfs_over)(folder)
    con = duckdb.connect(str(s.warehouse_path))
    try:
        period = con.execute("select period from published.snapshots where is_current").fetchall()[0][0]
        errors = {
            "readers_copy": _attempt(export_reader_copy, con, s.published_path),
            "parquet": _attempt(write_parquet, con, s.parquet_dir, period),
        }
    finally:
        con.close()
    return {
        "errors": errors,
        "files_unchanged": _files(folder) == before,
        "left_behind": sorted(p.name for p in folder.rglob("*") if "incoming" in p.name),
        "reader_tables_unchanged": _reader_tables(s.published_path) == tables_before,
    }


def warehouse_folder(home: Path) -> dict:
    """The publish transaction onto a full disk under the warehouse: it rolls back whole."""
    s = Settings(home=home)
    folder = home / "wh"
    folder.mkdir()
    for suffix in ("", ".wal"):
        src = s.warehouse_path.with_name(s.warehouse_path.name + suffix)
        if src.exists():
            shutil.move(src, folder / src.name)
    target = folder / "warehouse.duckdb"
    con = duckdb.connect(str(target))
    [(old, period)] = con.execute(
        "select run_id, period from published.snapshots where is_current"
    ).fetchall()
    new = str(uuid.uuid4())
    con.execute(
        "insert into ml.predictions by name select * replace ($new as run_id) from ml.predictions "
        "where run_id = $old",
        {"new": new, "old": old},
    )
    con.execute("checkpoint")
    con.close()
    _mount_tmpfs_over(folder)
    con = duckdb.connect(str(target))
    error = None
    try:
        publish_snapshot(con, RunContext.create(period, settings=s, run_id=new), "v-disk-full")
    except Exception as exc:  # whatever DuckDB raises is what the operator would see
        error = f"{type(exc).__name__}: {exc}"
    con.close()
    (folder / "filler").unlink()
    con = duckdb.connect(str(target), read_only=True)
    try:
        current = con.execute("select run_id from published.snapshots where is_current").fetchall()
        new_rows = sum(
            con.execute(f"select count(*) from published.{t} where run_id = ?", [new]).fetchall()[0][0]
            for t in ("snapshots", "income_bands_history", "band_summary_history", "band_movers_history")
        )
    finally:
        con.close()
    return {"error": error, "current": [r for (r,) in current], "previous": old, "new_run_rows": new_rows}


def main() -> None:
    home, scenario, out = Path(sys.argv[1]), sys.argv[2], Path(sys.argv[3])
    if scenario == "full":
        result = published_folder(home, read_only=False)
    elif scenario == "read_only":
        result = published_folder(home, read_only=True)
    else:
        result = warehouse_folder(home)
    out.write_text(json.dumps(result, indent=2))


if __name__ == "__main__":
    main()
