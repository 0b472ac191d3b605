"""Finding customer-level values in text that leaves the warehouse (logs, alerts, artifacts, reports)."""

from __future__ import annotations

import csv
import re
from pathlib import Path


def demo_needles(customers: Path, extracts: list[Path]) -> tuple[set[str], set[str]]:
    """The demo bank's customer, account and transaction ids, and its distinctive posting amounts (at least
    100, with cents that are not .00: a "100.00" could be any figure), as written in the extracts."""
    with customers.open(newline="") as f:
        ids = {row["customer_id"] for row in csv.DictReader(f)}
    amounts = set()
    for extract in extracts:
        with extract.open(newline="") as f:
            for row in csv.DictReader(f):
                ids.update((row["txn_id"], row["account_id"]))
                if re.fullmatch(r"\d{3,}\.\d\d", row["amount"]) and not row["amount"].endswith(".00"):
                    amounts.add(row["amount"])
    return ids, amounts


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
