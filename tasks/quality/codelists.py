"""Code lists the ledger suite checks values against, each from a maintained source.

- merchant categories: ISO 18245, from the `iso18245` package (every code it knows: the ISO-assigned
  ones and those the card schemes assign within ISO 18245's ranges);
- bank transaction codes (Domain, Family, SubFamily) and purpose codes: the ISO 20022 external code
  sets, shipped as data files in `expectations/codes/` with their version and source.

Validation joins the lists in DuckDB into derived boolean columns (`merchant_category_listed`, …) that
the suite's rules check; each rule names its list in `meta.code_list`. (GX copies an expectation's
value set every time it reads its configuration: a thousand-code list in the suite cost more than every
other rule together.) The lists stay data that can be replaced when a new publication comes out.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from functools import cache
from importlib import resources

from ledgerband.tasks.core.errors import LedgerbandError

_PACKAGE = "ledgerband.expectations"
BTC_FILE = "iso20022_bank_transaction_codes.json"
PURPOSE_FILE = "iso20022_purpose_codes.json"


@dataclass(frozen=True)
class CodeList:
    """One shipped list: its codes, and where they come from (shown in the validation results page)."""

    name: str
    source: str
    version: str
    codes: tuple[str, ...]


def _read(file: str) -> dict:
    node = resources.files(_PACKAGE) / "codes" / file
    try:
        return json.loads(node.read_text(encoding="utf-8"))
    except (OSError, json.JSONDecodeError) as exc:
        raise LedgerbandError(f"code list expectations/codes/{file} cannot be read ({exc})") from exc


def _codes(data: dict, key: str, file: str) -> tuple[str, ...]:
    values = data.get(key)
    if not isinstance(values, list) or not values or not all(isinstance(v, str) for v in values):
        raise LedgerbandError(
            f"code list expectations/codes/{file}: {key!r} must be a non-empty list of codes"
        )
    return tuple(sorted(set(values)))


@cache
def bank_transaction_codes() -> dict[str, CodeList]:
    """ISO 20022 bank transaction code lists by level: 'domain', 'domain/family' (the codification's
    combinations, as 'PMNT/RCDT'), 'subfamily'."""
    data = _read(BTC_FILE)
    pairs = data.get("domain_families")
    if not isinstance(pairs, dict) or not pairs:
        raise LedgerbandError(
            f"code list expectations/codes/{BTC_FILE}: 'domain_families' must map domains to families"
        )
    data = {**data, "domain_family": [f"{d}/{f}" for d, families in pairs.items() for f in families]}
    return {
        level: CodeList(
            f"{data.get('name', 'ISO 20022 bank transaction codes')} ({level})",
            str(data.get("source", "")),
            str(data.get("version", "")),
            _codes(data, key, BTC_FILE),
        )
        for level, key in (
            ("domain", "domains"),
            ("domain/family", "domain_family"),
            ("subfamily", "subfamilies"),
        )
    }


@cache
def purpose_codes() -> CodeList:
    """ISO 20022 ExternalPurpose1Code."""
    data = _read(PURPOSE_FILE)
    return CodeList(
        str(data.get("name", "ISO 20022 ExternalPurpose1Code")),
        str(data.get("source", "")),
        str(data.get("version", "")),
        _codes(data, "codes", PURPOSE_FILE),
    )


@cache
def merchant_categories() -> CodeList:
    """ISO 18245 merchant category codes known to the iso18245 package."""
    import iso18245

    codes = tuple(sorted(m.mcc for m in iso18245.get_all_mccs()))
    return CodeList(
        "ISO 18245 merchant category codes",
        "iso18245 package (PyPI)",
        f"iso18245 {_version('iso18245')}, ISO 18245:{iso18245.ISO_VERSION_YEAR}",
        codes,
    )


def _version(dist: str) -> str:
    from importlib.metadata import version

    return version(dist)


def as_table():
    """Every list as one Arrow table (list, code), joined by validation into the derived *_listed columns."""
    import pyarrow as pa

    lists = suite_parameters()
    return pa.table(
        {
            "list": [name for name, codes in lists.items() for _ in codes],
            "code": [code for codes in lists.values() for code in codes],
        }
    )


def suite_parameters() -> dict[str, list[str]]:
    """Each code list by the name the suite's rules give it (meta.code_list)."""
    btc = bank_transaction_codes()
    return {
        "merchant_categories": list(merchant_categories().codes),
        "btc_domains": list(btc["domain"].codes),
        "btc_domain_families": list(btc["domain/family"].codes),
        "btc_subfamilies": list(btc["subfamily"].codes),
        "purpose_codes": list(purpose_codes().codes),
    }


def sources() -> list[CodeList]:
    """Every list with its source and version (for the validation results page)."""
    return [merchant_categories(), *bank_transaction_codes().values(), purpose_codes()]
