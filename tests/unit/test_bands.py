import numpy as np
import pytest

from ledgerband.tasks.modeling.bands import assign_band_index, band_agreement, band_table

EDGES = (25_000, 40_000, 60_000)


@pytest.mark.parametrize(
    "value, band",
    [
        (0.0, 0),
        (24_999.99, 0),
        (25_000.0, 1),  # an edge belongs to the band above it: bands are [lower, upper)
        (39_999.99, 1),
        (60_000.0, 3),
        (1e9, 3),  # the top band is open-ended
    ],
)
def test_band_index_is_half_open(value, band):
    assert assign_band_index([value], EDGES)[0] == band


def test_band_table_labels_and_bounds():
    t = band_table(EDGES, "EUR")
    assert list(t["income_band"]) == ["B1", "B2", "B3", "B4"]
    assert t.loc[0, "band_label"] == "under 25,000 EUR"
    assert t.loc[3, "band_label"] == "60,000 EUR and over"
    assert np.isnan(t.loc[0, "lower_bound"]) and np.isnan(t.loc[3, "upper_bound"])


def test_observed_salary_wins_then_an_observed_pension_then_the_estimate():
    import pandas as pd

    from ledgerband.tasks.modeling.amounts import published_figures

    salary = pd.Series([50_000.0, None, None])
    pension = pd.Series([12_000.0, 12_000.0, None])
    estimate = pd.Series([1.0, 2.0, 30_000.004])
    got = published_figures(salary, pension, estimate, estimate, estimate, EDGES)
    assert got["income_value"].tolist() == [50_000.0, 12_000.0, 30_000.0]
    assert got["band_index"].tolist() == [2, 0, 1]
    assert got["band_source"].tolist() == ["observed_salary", "observed_pension", "model_estimate"]
    # an observed amount carries no interval and no band confidence
    assert got[["estimate_low", "estimate_high", "band_confidence"]].iloc[:2].isna().all().all()


def test_band_agreement_counts_exact_and_adjacent_bands():
    y_true = np.array([10_000, 30_000, 50_000, 70_000])
    y_pred = np.array([12_000, 45_000, 10_000, 65_000])  # same, one up, two down, same
    assert band_agreement(y_true, y_pred, EDGES) == {"band_accuracy": 0.5, "within_one_band": 0.75}


def test_published_band_sql_agrees_with_python_at_every_edge(con):
    """warehouse/sql/published/income_bands.sql only looks up the band set by amounts.published_figures:
    the published band must be the Python band of the published (rounded) amount at every edge."""
    from datetime import datetime

    import pandas as pd

    from ledgerband.tasks.modeling.amounts import published_figures
    from ledgerband.tasks.modeling.bands import write_band_table
    from ledgerband.tasks.publish.snapshot import insert_from_file

    write_band_table(con, EDGES, "EUR")
    # 24_999.996 rounds to 25,000.00: published amount and band must agree after rounding.
    values = [0.0, 24_999.99, 25_000.0, 40_000.0, 59_999.99, 60_000.0, 250_000.0, 24_999.996]
    # Odd rows carry an observed salary (which wins over the estimate), even rows only an estimate.
    observed = pd.Series([v if i % 2 else None for i, v in enumerate(values)], dtype="float64")
    estimate = pd.Series([1.0 if i % 2 else v for i, v in enumerate(values)], dtype="float64")
    rows = pd.DataFrame(
        {"run_id": "r1", "customer_id": [f"C{i}" for i in range(len(values))], "estimate": estimate}
    ).assign(annual_salary=observed)
    no_pension = pd.Series([None] * len(values), dtype="float64")
    rows = rows.join(published_figures(observed, no_pension, estimate, estimate, estimate, EDGES))
    con.register("rows", rows)
    con.execute("insert into ml.predictions by name select * from rows")
    insert_from_file(
        con,
        "published.income_bands_history",
        "income_bands",
        {
            "run_id": "r1",
            "period": "2026-10",
            "model_version": "m",
            "published_at": datetime(2026, 11, 2),
            "currency": "EUR",
        },
    )
    got = con.execute(
        "select customer_id, income_band, band_source, annual_income_estimate::double "
        "from published.income_bands_history order by customer_id"
    ).fetchall()
    published_amounts = [g[3] for g in got]
    assert published_amounts == [round(v, 2) for v in values]
    assert [g[1] for g in got] == [f"B{k + 1}" for k in assign_band_index(published_amounts, EDGES)]
    assert got[-1][1] == "B2"  # 24,999.996 is published as 25,000.00, so it belongs in B2
    assert [g[2] for g in got] == [
        "model_estimate" if i % 2 == 0 else "observed_salary" for i in range(len(values))
    ]


def test_a_backfilled_month_never_moves_readers_back_in_time(con):
    """Publishing 2026-09 after 2026-10 adds a historical snapshot; 2026-10 stays current (then 2026-11 moves on)."""
    import pandas as pd

    from ledgerband.tasks.core.context import RunContext
    from ledgerband.tasks.core.settings import Settings
    from ledgerband.tasks.modeling.amounts import published_figures
    from ledgerband.tasks.publish.snapshot import publish_snapshot

    con.execute("create schema if not exists features")
    con.execute("create table features.customer as select 'C1' as customer_id, 'North Reach' as home_region")
    current = []
    for run_id, period in (("r-oct", "2026-10"), ("r-sep", "2026-09"), ("r-nov", "2026-11")):
        salary, none = pd.Series([30_000.0]), pd.Series([None], dtype="float64")
        rows = pd.DataFrame(
            {"run_id": [run_id], "customer_id": ["C1"], "estimate": [1.0], "annual_salary": salary}
        )
        rows = rows.join(
            published_figures(salary, none, rows["estimate"], rows["estimate"], rows["estimate"], EDGES)
        )
        con.register("rows", rows)
        con.execute("insert into ml.predictions by name select * from rows")
        ctx = RunContext.create(period, settings=Settings(), run_id=run_id)
        result = publish_snapshot(con, ctx, f"model-{period}")
        current.append(
            (
                period,
                result.is_current,
                con.execute("select period from published.snapshots where is_current").fetchall(),
            )
        )
    assert current == [
        ("2026-10", True, [("2026-10",)]),
        ("2026-09", False, [("2026-10",)]),  # the backfill is kept, not made current
        ("2026-11", True, [("2026-11",)]),
    ]
    assert con.execute("select count(*) from published.snapshots").fetchall() == [(3,)]
