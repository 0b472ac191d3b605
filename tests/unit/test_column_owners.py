"""Every column readers get has exactly one place that computes it, named here and in DEVELOPERS.md.

The table below is the map a newcomer reads ("where is band_confidence computed?"). The tests keep it
true: every published column has an owner; each owner's file exists and names the column; the figures
decided per customer come out of `published_figures` and nothing else; the publish SQL holds no logic
of its own; DEVELOPERS.md shows this very table.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pandas as pd

from ledgerband.tasks.publish.readers_contract import TABLES

ROOT = Path(__file__).parents[2]
FIGURES = "tasks/modeling/amounts.py::published_figures"
SNAPSHOT = "tasks/publish/snapshot.py::publish_snapshot"

# (table, column) -> (owner "path::symbol", what the owner decides). The column names the published one;
# where the owner calls it otherwise, `what` says so.
OWNERS: dict[tuple[str, str], tuple[str, str]] = {
    ("income_bands", "run_id"): (SNAPSHOT, "the run that publishes"),
    ("income_bands", "period"): (SNAPSHOT, "the run's month"),
    ("income_bands", "customer_id"): (
        "warehouse/sql/features/customer.sql::customer_id",
        "one row per customer",
    ),
    ("income_bands", "income_band"): (
        FIGURES,
        "band_index; its code is ref.income_bands' (modeling/bands.py)",
    ),
    ("income_bands", "band_source"): (FIGURES, "salary, then pension, then the model"),
    ("income_bands", "annual_income_estimate"): (FIGURES, "income_value, rounded"),
    ("income_bands", "currency"): (SNAPSHOT, "bands.currency"),
    ("income_bands", "estimate_low"): (FIGURES, "rounded down to intervals.round_to"),
    ("income_bands", "estimate_high"): (FIGURES, "rounded up to intervals.round_to"),
    ("income_bands", "band_confidence"): (FIGURES, "share inside the band, two decimals"),
    ("income_bands", "model_version"): ("tasks/modeling/train.py::model_version", "period.champion.run"),
    ("income_bands", "published_at"): (SNAPSHOT, "the publish transaction's time"),
    **{
        ("band_summary", c): ("warehouse/sql/published/band_summary.sql::" + c, "count per cell")
        for c in TABLES["band_summary"][1]
    },
    **{
        ("band_movers", c): ("warehouse/sql/published/band_movers.sql::" + c, "moves between snapshots")
        for c in TABLES["band_movers"][1]
    },
    **{
        ("income_band_scheme", c): ("tasks/modeling/bands.py::band_table", "from bands.edges")
        for c in TABLES["income_band_scheme"][1]
    },
    **{("snapshots", c): (SNAPSHOT, "one row per publish") for c in TABLES["snapshots"][1]},
    **{
        ("decisions", c): ("tasks/gates/__init__.py::enforce", "every gate's Decision")
        for c in TABLES["decisions"][1]
    },
}
# What readers see of a small cell: its count nulled, in one place for every table that has cells.
SUPPRESSION = "tasks/publish/snapshot.py::READER_TABLES"


def owners_markdown() -> str:
    lines = ["| readers' table.column | computed in | what it decides |", "|---|---|---|"]
    for (table, column), (owner, what) in OWNERS.items():
        lines.append(f"| `{table}.{column}` | `{owner}` | {what} |")
    lines.append(f"| (small cells of band_summary, band_movers) | `{SUPPRESSION}` | customer_count null |")
    return "\n".join(lines)


def test_every_published_column_has_exactly_one_owner():
    published = {(t, c) for t, (_, columns) in TABLES.items() for c in columns}
    assert set(OWNERS) == published, (
        f"columns without an owner: {sorted(published - set(OWNERS))}; owners of no column: "
        f"{sorted(set(OWNERS) - published)}"
    )


def test_each_owner_file_exists_and_names_what_it_owns():
    for (table, column), (owner, _) in OWNERS.items():
        path, symbol = owner.split("::")
        text = (ROOT / path).read_text()
        assert re.search(rf"\b{re.escape(symbol)}\b", text), f"{table}.{column}: {path} never names {symbol}"
    path, symbol = SUPPRESSION.split("::")
    assert symbol in (ROOT / path).read_text()


def test_the_per_customer_figures_come_out_of_published_figures():
    from ledgerband.tasks.modeling.amounts import published_figures

    none = pd.Series([np.nan, np.nan])
    got = published_figures(
        none,
        none,
        pd.Series([30_000.0, 70_000.0]),
        [20_000.0, 50_000.0],
        [40_000.0, 90_000.0],
        (25_000.0, 60_000.0),
        estimate_unit=1_000,
    )
    decided = {
        "band_source",
        "income_value",
        "band_index",
        "estimate_low",
        "estimate_high",
        "band_confidence",
    }
    assert decided <= set(got.columns)


def test_the_publish_sql_only_looks_up_and_renames():
    sql = (ROOT / "warehouse/sql/published/income_bands.sql").read_text()
    body = "\n".join(line for line in sql.splitlines() if not line.lstrip().startswith("--")).lower()
    for logic in ("case", "round(", "coalesce(", "greatest(", "least(", "floor(", "ceil("):
        assert logic not in body, f"income_bands.sql computes something ({logic}): that belongs in {FIGURES}"


def test_developers_md_shows_this_table():
    text = (ROOT / "DEVELOPERS.md").read_text()
    block = re.search(r"<!-- column-owners -->\n(.*?)\n<!-- /column-owners -->", text, re.S)
    assert block, "DEVELOPERS.md lacks the <!-- column-owners --> block"
    assert block.group(1).strip() == owners_markdown(), (
        "DEVELOPERS.md's table of column owners differs from tests/unit/test_column_owners.py: paste\n"
        + owners_markdown()
    )
