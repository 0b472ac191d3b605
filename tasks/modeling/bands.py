"""Income bands from configured fixed edges. A band is half-open: lower <= income < upper.

This module is the one place a value is put in a band (`assign_band_index`): training bands the
out-of-fold estimates with it, and `amounts.published_figures` the amounts to publish (stored in
ml.predictions); SQL only looks bands up in ref.income_bands, which is written from `band_table`.
"""

from __future__ import annotations

from collections.abc import Sequence

import duckdb
import numpy as np
import pandas as pd


def _money(x: float) -> str:
    return f"{x:,.0f}"


def band_table(edges: Sequence[float], currency: str) -> pd.DataFrame:
    """One row per band: code (B1, B2, ...), bounds and a readable label. B1 has no lower bound."""
    bounds = [None, *edges]
    rows = []
    for i, lower in enumerate(bounds):
        upper = edges[i] if i < len(edges) else None
        if lower is None:
            label = f"under {_money(upper)} {currency}"
        elif upper is None:
            label = f"{_money(lower)} {currency} and over"
        else:
            label = f"{_money(lower)} to under {_money(upper)} {currency}"
        rows.append(
            {
                "band_index": i,
                "income_band": f"B{i + 1}",
                "lower_bound": lower,
                "upper_bound": upper,
                "band_label": label,
            }
        )
    return pd.DataFrame(rows).astype({"lower_bound": "float64", "upper_bound": "float64"})


def assign_band_index(values: np.ndarray | Sequence[float], edges: Sequence[float]) -> np.ndarray:
    """0-based band index of each value: the number of band edges at or below it."""
    return np.searchsorted(np.asarray(edges, dtype=float), np.asarray(values, dtype=float), side="right")


def band_agreement(y_true: np.ndarray, y_pred: np.ndarray, edges: Sequence[float]) -> dict[str, float]:
    """Share of customers whose predicted band equals the observed band, and is at most one band away."""
    t, p = assign_band_index(y_true, edges), assign_band_index(y_pred, edges)
    if len(t) == 0:
        return {"band_accuracy": float("nan"), "within_one_band": float("nan")}
    return {
        "band_accuracy": float(np.mean(t == p)),
        "within_one_band": float(np.mean(np.abs(t - p) <= 1)),
    }


def write_band_table(con: duckdb.DuckDBPyConnection, edges: Sequence[float], currency: str) -> None:
    """(Re)write ref.income_bands from settings; the publish SQL joins on it."""
    bands = band_table(edges, currency)
    con.register("band_rows", bands)
    con.execute("delete from ref.income_bands")
    con.execute(
        "insert into ref.income_bands select band_index, income_band, lower_bound, upper_bound, band_label "
        "from band_rows"
    )
    con.unregister("band_rows")
