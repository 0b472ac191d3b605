"""Finding customer-level values in text that leaves the warehouse (logs, alerts, artifacts, reports)."""

from __future__ import annotations

import csv
import re
from decimal import Decimal
from pathlib import Path


def _distinctive(amount: str) -> bool:
    """At least 100, with cents that are not .00: a "100.00" could be any figure."""
    return bool(re.fullmatch(r"\d{3,}\.\d\d", amount)) and not amount.endswith(".00")


def demo_needles(
    customers: Path, extracts: list[Path], verified: Path | None = None
) -> tuple[set[str], set[str]]:
    """The demo bank's customer, account and transaction ids, and its distinctive posting amounts, as written
    in the extracts; with `verified`, the distinctive verified incomes too (personal data, never published)."""
    with customers.open(newline="") as f:
        ids = {row["customer_id"] for row in csv.DictReader(f)}
    amounts = set()
    for extract in extracts:
        with extract.open(newline="") as f:
            for row in csv.DictReader(f):
                ids.update((row["txn_id"], row["account_id"]))
                if _distinctive(row["amount"]):
                    amounts.add(row["amount"])
    if verified is not None:
        amounts |= {amount for _, amount in verified_pairs(verified) if _distinctive(amount)}
    return ids, amounts


def verified_pairs(verified: Path) -> set[tuple[str, str]]:
    """(customer_id, annual_net_income) of every record of a verified incomes file, as written."""
    with verified.open(newline="", encoding="utf-8-sig") as f:
        return {(row["customer_id"], row["annual_net_income"]) for row in csv.DictReader(f)}


def verified_in_rows(rows: list[tuple], pairs: set[tuple[str, str]]) -> list[tuple[str, str]]:
    """Up to five verified (customer_id, amount) pairs found in table rows: a row holding the customer's id
    and a value equal to the verified amount to the cent (as a number or as text)."""
    by_customer: dict[str, set[Decimal]] = {}
    for customer, amount in pairs:
        by_customer.setdefault(customer, set()).add(Decimal(amount))
    found = []
    for row in rows:
        for customer in {v for v in row if isinstance(v, str) and v in by_customer}:
            for value in row:
                try:
                    number = Decimal(str(value)).quantize(Decimal("0.01"))
                except (ArithmeticError, ValueError):
                    continue
                if number in by_customer[customer]:
                    found.append((customer, str(number)))
    return sorted(set(found))[:5]


def leaks(texts: dict[str, str], ids: set[str], amounts: set[str]) -> dict[str, list[str]]:
    """For each text that holds any, up to five customer ids and five amounts found in it (amounts also
    when written with thousands separators). HTML is read as its text, outside tags."""
    found = {}
    for name, text in texts.items():
        if name.endswith(".html"):
            # Text as a reader sees it: tags and their attributes (SVG path coordinates) are not data.
            text = re.sub(r"<[^>]*>", " ", text)
        words = set(re.findall(r"[A-Za-z0-9_-]+", text))
        numbers = {n.replace(",", "") for n in re.findall(r"\d{1,3}(?:,\d{3})+\.\d\d|\d+\.\d\d", text)}
        hits = sorted(words & ids)[:5] + sorted(numbers & amounts)[:5]
        if hits:
            found[name] = hits
    return found
