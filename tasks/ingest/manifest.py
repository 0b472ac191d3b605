"""Control manifests: one per extract file, written by the sending system (the extract contract)."""

from __future__ import annotations

import csv
import hashlib
import io
import json
import re
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from decimal import Decimal, InvalidOperation
from pathlib import Path

from ledgerband.tasks.core.errors import ExtractError, LedgerbandError
from ledgerband.tasks.core.period import Period
from ledgerband.tasks.ingest.extract_contract import LEDGER_COLUMNS

MANIFEST_FIELDS = ("period", "institution", "file", "sha256", "row_count", "credit_total", "debit_total")
# Optional: the source system that sent the extract, when a period arrives as several files (one per
# source system); settings quality.expected_sources then lists the sources a complete period has.
SOURCE_FIELD = "source"
_DECIMAL_TEXT = re.compile(r"^-?\d+(\.\d+)?$")


@dataclass(frozen=True)
class Manifest:
    path: Path
    period: Period
    institution: str
    file: str
    sha256: str
    row_count: int
    credit_total: Decimal
    debit_total: Decimal
    source: str | None = None

    @property
    def extract_path(self) -> Path:
        return self.path.parent / self.file


def sender_figures(data: bytes) -> dict:
    """The figures a sending system puts in a manifest for these bytes of a CSV extract: sha256, row_count
    (records after the header) and the credit and debit totals of the amounts that read as decimals.

    For the demo's damaged files and the test fixtures, which must look re-issued by their sender; ingest
    computes its own figures and never trusts these.
    """
    text = data.decode("utf-8-sig", errors="replace")
    rows = list(csv.reader(io.StringIO(text, newline="")))[1:]
    amount, direction = LEDGER_COLUMNS.index("amount"), LEDGER_COLUMNS.index("direction")
    totals = {"CRDT": Decimal("0.00"), "DBIT": Decimal("0.00")}
    for fields in rows:
        if len(fields) == len(LEDGER_COLUMNS) and fields[direction] in totals:
            try:
                totals[fields[direction]] += Decimal(fields[amount])
            except InvalidOperation:
                pass
    return {
        "sha256": hashlib.sha256(data).hexdigest(),
        "row_count": len(rows),
        "credit_total": f"{totals['CRDT']:.2f}",
        "debit_total": f"{totals['DBIT']:.2f}",
    }


def read_manifest(path: Path) -> Manifest:
    """Parse and check one control manifest; every problem names the manifest file."""
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise ExtractError(f"manifest {path}: cannot be read as JSON ({exc})") from exc
    if not isinstance(data, dict):
        raise ExtractError(f"manifest {path}: expected a JSON object")
    missing = [k for k in MANIFEST_FIELDS if k not in data]
    if missing:
        raise ExtractError(f"manifest {path}: missing field(s) {', '.join(missing)}")
    if not isinstance(data["row_count"], int) or data["row_count"] < 0:
        raise ExtractError(
            f"manifest {path}: row_count must be a non-negative integer, got {data['row_count']!r}"
        )
    totals = {}
    for key in ("credit_total", "debit_total"):
        text = data[key]
        if not isinstance(text, str) or not _DECIMAL_TEXT.match(text):
            raise ExtractError(
                f'manifest {path}: {key} must be a decimal string like "1234.56", got {text!r}'
            )
        try:
            totals[key] = Decimal(text)
        except InvalidOperation as exc:  # pragma: no cover - regex already guards
            raise ExtractError(f"manifest {path}: {key} {text!r} is not a decimal") from exc
    if not re.fullmatch(r"[0-9a-f]{64}", str(data["sha256"]).lower()):
        raise ExtractError(f"manifest {path}: sha256 must be 64 hex digits")
    try:
        period = Period.parse(str(data["period"]))
    except LedgerbandError as exc:
        raise ExtractError(f"manifest {path}: field period: {exc}") from exc
    if Path(data["file"]).name != data["file"]:
        raise ExtractError(
            f"manifest {path}: file must be a bare file name beside the manifest, got {data['file']!r}"
        )
    return Manifest(
        path=path,
        period=period,
        institution=str(data["institution"]),
        file=data["file"],
        sha256=str(data["sha256"]).lower(),
        row_count=data["row_count"],
        credit_total=totals["credit_total"],
        debit_total=totals["debit_total"],
        source=_source(path, data.get(SOURCE_FIELD)),
    )


def _source(path: Path, value: object) -> str | None:
    if value is None:
        return None
    if not isinstance(value, str) or not re.fullmatch(r"[A-Za-z0-9_.-]{1,64}", value):
        raise ExtractError(
            f"manifest {path}: source must be a short name (letters, digits, _ . -), got {value!r}"
        )
    return value


def find_manifests(landing_dir: Path, period: Period, expected_sources: Sequence[str] = ()) -> list[Manifest]:
    """The manifests in `<landing_dir>/<period>/`, each checked to belong to that period.

    With `expected_sources`, the period is complete only when each listed source system has exactly one
    manifest (field `source`) and its file has arrived; a manifest from an unlisted source is refused.
    """
    folder = Path(landing_dir) / str(period)
    if not folder.is_dir():
        raise ExtractError(f"no landing folder for period {period}: expected {folder}")
    manifests = [read_manifest(p) for p in sorted(folder.glob("*.manifest.json"))]
    if not manifests:
        raise ExtractError(
            f"no manifest (*.manifest.json) in {folder}: every extract needs its control manifest"
        )
    for m in manifests:
        if m.period != period:
            raise ExtractError(
                f"manifest {m.path}: says period {m.period}, but it lies in the folder for {period}"
            )
        if not m.extract_path.is_file():
            raise ExtractError(f"manifest {m.path}: names file {m.file}, which is not in {folder}")
        confined(Path(landing_dir), m.path)
        confined(Path(landing_dir), m.extract_path)
    if expected_sources:
        _check_sources(folder, manifests, list(expected_sources))
    return manifests


def confined(landing_dir: Path, path: Path) -> None:
    """A file is read only if it really lies in the landing folder (a symlink out of it is refused)."""
    root = landing_dir.resolve()
    if not path.resolve().is_relative_to(root):
        raise ExtractError(
            f"{path}: resolves to {path.resolve()}, outside the landing folder {root}; "
            "files are read only from the landing folder (is it a symbolic link?)"
        )


def _check_sources(folder: Path, manifests: list[Manifest], expected: list[str]) -> None:
    for m in manifests:
        if m.source not in expected:
            raise ExtractError(
                f"manifest {m.path}: source {m.source!r} is not one of quality.expected_sources {expected} "
                "(each extract's manifest names its source system)"
            )
    seen: dict[str, list[str]] = {}
    for m in manifests:
        seen.setdefault(str(m.source), []).append(m.path.name)
    twice = {src: names for src, names in seen.items() if len(names) > 1}
    if twice:
        raise ExtractError(
            f"{folder}: more than one manifest for source(s) {twice}; one extract per source and month"
        )
    missing = [src for src in expected if src not in seen]
    if missing:
        raise ExtractError(
            f"{folder}: period incomplete, no extract yet from source(s) {missing} "
            f"(quality.expected_sources {expected}; arrived: {sorted(seen)})"
        )


def manifests_to_load(
    landing_dir: Path,
    periods: Iterable[Period],
    accepted_periods: set[Period],
    expected_sources: Sequence[str] = (),
) -> list[Path]:
    """Manifests of every period in `periods` that has a landing folder.

    A period whose folder is gone is fine once it has an accepted extract (landing folders are often
    cleaned after loading); otherwise its absence is an error naming the folder looked for.
    """
    paths: list[Path] = []
    for period in periods:
        if not (Path(landing_dir) / str(period)).is_dir() and period in accepted_periods:
            continue
        paths.extend(m.path for m in find_manifests(landing_dir, period, expected_sources))
    return paths
