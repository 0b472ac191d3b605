"""Damage the demo's last extract on purpose, so the quality gate can be seen at work (`demo --inject-defects`).

Two modes:
- "quarantine": a handful of records each get one defect a real extract can carry (a NUL byte, a signed
  amount, another currency, an unassigned merchant category, a day-first date, an unknown customer, an
  unlisted purpose code) and one posting is removed, which breaks one account's balance chain. Well
  under quality.max_quarantine_share: the run publishes, and the report shows each record quarantined
  with its rule.
- "stop": every 40th record's amount is written with one decimal place (2.5% of the file), more than
  the gate allows: the run stops at the quality gate (exit 3) and the report says why.

The manifest is re-issued as the sender would compute it from the damaged file (count, totals, checksum),
so the damage reaches the row rules rather than stopping at reconciliation.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from ledgerband.tasks.core.errors import LedgerbandError
from ledgerband.tasks.demo.generator import DemoFiles
from ledgerband.tasks.ingest.manifest import sender_figures

MODES = ("quarantine", "stop")


def inject(files: DemoFiles, mode: str, seed: int = 0) -> list[str]:
    """Damage the last month's extract in place; returns one line per defect (what and where)."""
    if mode not in MODES:
        raise LedgerbandError(f"--inject-defects must be one of {', '.join(MODES)}, got {mode!r}")
    extract, manifest = files.extracts[-1], files.manifests[-1]
    if extract.suffix.lower() != ".csv":
        raise LedgerbandError("--inject-defects damages CSV extracts: use --format csv")
    lines = extract.read_text(encoding="utf-8").splitlines()
    header = lines[0].split(",")
    col = {name: i for i, name in enumerate(header)}
    rows = [line.split(",") for line in lines[1:]]
    rng = np.random.default_rng(seed)
    done: list[str] = []

    if mode == "stop":
        damaged = range(0, len(rows), 40)
        for i in damaged:
            rows[i][col["amount"]] = rows[i][col["amount"]][:-1]  # "12.57" -> "12.5"
        done.append(f"amount written with one decimal place on every 40th record ({len(damaged)} records)")
    else:
        accounts = sorted({r[col["account_id"]] for r in rows})
        chosen = rng.choice(len(accounts), size=8, replace=False)
        by_account: dict[str, list[int]] = {}
        for i, r in enumerate(rows):
            by_account.setdefault(r[col["account_id"]], []).append(i)

        def pick(k: int, need: str | None = None) -> int:
            candidates = by_account[accounts[chosen[k]]]
            usable = [i for i in candidates if not need or rows[i][col[need]]]
            return usable[len(usable) // 2] if usable else candidates[len(candidates) // 2]

        edits = [
            ("counterparty_id", lambda v: v[:3] + "\x00" + v[3:], "a NUL byte in counterparty_id"),
            ("amount", lambda v: "-" + v, "a signed amount"),
            ("currency", lambda v: "USD", "a booking in USD"),
            ("merchant_category", lambda v: "0001", "merchant category 0001 (not assigned in ISO 18245)"),
            ("booking_date", lambda v: f"{v[8:10]}/{v[5:7]}/{v[0:4]}", "a day-first booking date"),
            ("customer_id", lambda v: "CX" + v[2:] + "9", "a customer_id missing from the customer file"),
            ("purpose_code", lambda v: "PAYX", "purpose code PAYX (not in ExternalPurpose1Code)"),
        ]
        for k, (column, change, what) in enumerate(edits):
            i = pick(k, "merchant_category" if column == "merchant_category" else None)
            rows[i][col[column]] = change(rows[i][col[column]])
            done.append(f"line {i + 2}: {what}")
        removed = pick(len(edits))
        txn = rows[removed][col["txn_id"]]
        account = rows[removed][col["account_id"]]
        del rows[removed]
        done.append(
            f"booking {txn} removed (was line {removed + 2}): account {account}'s balances no longer chain"
        )

    text = "\n".join([lines[0], *(",".join(r) for r in rows)]) + "\n"
    extract.write_text(text, encoding="utf-8")
    _reissue(manifest, extract)
    return done


def _reissue(manifest: Path, extract: Path) -> None:
    """The manifest the sender would write for these bytes."""
    body = json.loads(manifest.read_text(encoding="utf-8"))
    body.update(sender_figures(extract.read_bytes()))
    manifest.write_text(json.dumps(body, indent=2) + "\n", encoding="utf-8")
