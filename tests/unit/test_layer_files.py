"""The layer SQL files' headers: what each reads, and which may be built per bucket of customers."""

from __future__ import annotations

import re

from ledgerband.tasks.core.warehouse import layer_models
from ledgerband.tasks.layers.buckets import bucket_inputs, per_customer_models

# Schemas of the warehouse (warehouse/schema.sql and the layer folders).
_RELATION = re.compile(
    r"\b((?:raw|quarantine|ops|ref|staging|intermediate|features|ml|published)\.[a-z_]+)\b(?!\s*\()"
)


def _named(query: str) -> set[str]:
    """Relations a query names outside comments (column references like `staging.x` are not written so)."""
    body = "\n".join(line.split("--", 1)[0] for line in query.splitlines())
    return set(_RELATION.findall(body))


def test_every_relation_a_layer_file_reads_is_declared_in_its_header():
    # The build order and each bucket's inputs come from the `-- Reads:` header: an undeclared read
    # would be missing from a bucket's database.
    for model in layer_models():
        undeclared = _named(model.query) - set(model.reads) - {model.relation}
        assert not undeclared, f"{model.relation} reads {sorted(undeclared)} without declaring it"


def test_the_per_customer_files_are_the_salary_chain_and_the_labels():
    assert [m.relation for m in per_customer_models()] == [
        "intermediate.payroll_credits",
        "intermediate.pay_calendar_matches",
        "intermediate.pay_schedule_fits",
        "intermediate.salary_streams",
        "features.customer_label",
        "features.customer_salary",
    ]
    # What a bucket is handed: the bank-wide tables they read, never a per-customer file's output.
    assert bucket_inputs(per_customer_models()) == [
        "intermediate.pay_calendars",
        "intermediate.payers",
        "intermediate.received_credits",
        "ref.business_calendar",
        "ref.pay_frequencies",
        "staging.customers",
    ]
