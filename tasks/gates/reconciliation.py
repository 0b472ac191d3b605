"""Manifest reconciliation: does an extract hold what its control manifest says it holds?"""

from __future__ import annotations

from dataclasses import dataclass
from decimal import Decimal

from ledgerband.tasks.gates import QUALITY, Decision
from ledgerband.tasks.ingest.manifest import Manifest


@dataclass(frozen=True)
class FileCounts:
    """What the file turned out to hold."""

    rows_in_file: int  # data records read (loaded + malformed)
    credit_total: Decimal
    debit_total: Decimal
    unreadable: int  # records without a readable amount or direction (cannot be summed)


def reconcile(manifest: Manifest, counts: FileCounts) -> Decision:
    """Row count must match exactly; totals must match exactly when every record can be summed.

    Records without a readable amount or direction cannot be summed as the sender did; they are
    quarantined by validation and bounded by the quarantine-share check, so the totals are then noted as
    not verifiable instead of compared.
    """
    path = manifest.extract_path
    problems, notes = [], []
    if counts.rows_in_file != manifest.row_count:
        problems.append(
            f"rule manifest_row_count: file has {counts.rows_in_file} data records, manifest "
            f"{manifest.path.name} says {manifest.row_count}"
        )
    if counts.unreadable:
        notes.append(
            f"control totals not verifiable: {counts.unreadable} record(s) lack a readable amount or direction"
        )
    else:
        for name, got, want in (
            ("credit_total", counts.credit_total, manifest.credit_total),
            ("debit_total", counts.debit_total, manifest.debit_total),
        ):
            if got != want:
                problems.append(
                    f"rule manifest_{name}: file sums to {got}, manifest {manifest.path.name} says {want}"
                )
    figures = {
        "rows_in_file": counts.rows_in_file,
        "credit_total": str(counts.credit_total),
        "debit_total": str(counts.debit_total),
        "unreadable_records": counts.unreadable,
        "problems": problems,
        "notes": notes,
    }
    expected = {
        "row_count": manifest.row_count,
        "credit_total": str(manifest.credit_total),
        "debit_total": str(manifest.debit_total),
    }
    passed = not problems
    reason = (
        f"{path}: " + "; ".join(problems + notes) if (problems or notes) else f"{path}: matches its manifest"
    )
    return Decision(QUALITY, "manifest_reconciliation", passed, reason, figures, expected, subject=path.name)
