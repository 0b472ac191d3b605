"""The extract contract other systems write to: column names, and how a file is identified."""

from __future__ import annotations

import hashlib
from pathlib import Path

LEDGER_COLUMNS = (
    "txn_id",
    "account_id",
    "customer_id",
    "booking_date",
    "amount",
    "direction",
    "currency",
    "balance_after",
    "bank_txn_code",
    "purpose_code",
    "counterparty_id",
    "merchant_category",
    "merchant_region",
)
CUSTOMER_COLUMNS = ("customer_id", "birth_date", "sex", "home_region", "opened_date")
# The optional verified incomes file (beside customers.csv): incomes documented by the bank's lending side.
VERIFIED_INCOMES_FILE = "verified_incomes.csv"
VERIFIED_INCOME_COLUMNS = ("customer_id", "verified_on", "annual_net_income", "currency", "source")


def sha256_file(path: Path) -> str:
    """Hex SHA-256 of a file's bytes, as the manifest carries it."""
    h = hashlib.sha256()
    with Path(path).open("rb") as f:
        for block in iter(lambda: f.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()
