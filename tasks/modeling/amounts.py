"""Every published amount, bound and band confidence, computed once; the one rule for floors and rounding.

`published_figures` is the only place that decides, for each customer, what readers get: the source of the
figure (observed salary wins, then an observed pension, then the model's estimate), the amount, its band,
the interval around a model estimate and the band confidence. Training stores its result in
`ml.predictions`; `warehouse/sql/published/income_bands.sql` only looks the band's name up and renames.

Floors and rounding, one rule each:
- An income is never negative: every estimate that leaves a model goes through `never_negative`. A
  conformal model's point estimates are floored higher, at `CONFORMAL_FLOOR`, because a conformity score
  proportional to the estimate (MAPIE's gamma) needs strictly positive estimates.
- Observed amounts are published to the cent; a model estimate to `intervals.round_to` (its error is
  thousands: cents would be false precision); rounding happens before banding, so an amount and its band
  always agree. Interval bounds are rounded outwards to the same unit (rounding never narrows an
  interval). Band confidence is a share to two decimals, halves rounded away from zero.
"""

from __future__ import annotations

from collections.abc import Sequence
from decimal import ROUND_HALF_UP, Decimal

import numpy as np
import pandas as pd

from ledgerband.tasks.modeling.bands import assign_band_index, band_table

OBSERVED_SALARY = "observed_salary"
OBSERVED_PENSION = "observed_pension"
MODEL_ESTIMATE = "model_estimate"
BAND_SOURCES = (OBSERVED_SALARY, OBSERVED_PENSION, MODEL_ESTIMATE)

CONFORMAL_FLOOR = 1.0
"""The least point estimate a conformal model gives (gamma scores divide by the estimate)."""

CENT = 0.01
CONFIDENCE_DECIMALS = 2


def never_negative(values) -> np.ndarray:
    """Estimates as incomes: anything below zero becomes zero."""
    return np.clip(np.asarray(values, dtype=float), 0, None)


def widen_to(low, high, unit: float) -> tuple[np.ndarray, np.ndarray]:
    """Interval bounds on the published unit, rounded outwards: rounding never narrows an interval."""
    return (
        np.floor(np.asarray(low, dtype=float) / unit) * unit,
        np.ceil(np.asarray(high, dtype=float) / unit) * unit,
    )


def round_half_away(values, decimals: int) -> np.ndarray:
    """Round each value as written exactly in binary to `decimals`, halves away from zero: what SQL's
    round() does (0.125 -> 0.13; 0.015, stored as 0.01499..., -> 0.01), not numpy's halves to even.

    Values within a hair of a half are rounded exactly with `decimal`; the rest cannot be affected by the
    error of scaling them in floating point and are rounded by numpy.
    """
    x = np.asarray(values, dtype=float)
    scaled = x * 10.0**decimals
    out = np.round(scaled) / 10.0**decimals
    near_half = np.flatnonzero(np.abs(np.abs(scaled - np.trunc(scaled)) - 0.5) < 1e-6)
    step = Decimal(1).scaleb(-decimals)
    for i in near_half:
        out[i] = float(Decimal(float(x[i])).quantize(step, rounding=ROUND_HALF_UP))
    return out


def band_confidence(low, high, band_index, edges: Sequence[float]) -> np.ndarray:
    """Share of [low, high] inside the band `band_index` (1.0 for an interval of no width inside it).

    The interval is read as evenly spread between its bounds: 1 when it sits in one band, about 0.5 when
    a band edge cuts it in half. A plain-words guide, not a probability model.
    """
    low, high = np.asarray(low, dtype=float), np.asarray(high, dtype=float)
    bands = band_table(edges, "")
    lower = bands["lower_bound"].fillna(-np.inf).to_numpy()[band_index]
    upper = bands["upper_bound"].fillna(np.inf).to_numpy()[band_index]
    width = high - low
    inside = np.clip(np.minimum(high, upper) - np.maximum(low, lower), 0, None)
    with np.errstate(divide="ignore", invalid="ignore"):
        share = np.where(width > 0, inside / width, ((low >= lower) & (low < upper)).astype(float))
    return np.clip(share, 0, 1)


def published_figures(
    annual_salary: pd.Series,
    observed_pension: pd.Series,
    estimate: pd.Series,
    estimate_low,
    estimate_high,
    edges: Sequence[float],
    estimate_unit: float = CENT,
) -> pd.DataFrame:
    """What readers get for each customer, on the index of `estimate`.

    Columns: band_source, income_value (the published amount), band_index, and for a model estimate
    estimate_low / estimate_high (rounded outwards to `estimate_unit`) and band_confidence (two decimals);
    those three are null for an observed amount.
    """
    salary = annual_salary.astype("float64")
    pension = observed_pension.astype("float64")
    source = np.where(
        salary.notna(), OBSERVED_SALARY, np.where(pension.notna(), OBSERVED_PENSION, MODEL_ESTIMATE)
    )
    rounded_estimate = (estimate.astype("float64") / estimate_unit).round() * estimate_unit
    value = salary.fillna(pension).round(2).fillna(rounded_estimate.round(2))
    band_index = assign_band_index(value, edges).astype("int32")
    low, high = widen_to(estimate_low, estimate_high, estimate_unit)
    confidence = round_half_away(band_confidence(low, high, band_index, edges), CONFIDENCE_DECIMALS)
    observed = source != MODEL_ESTIMATE
    return pd.DataFrame(
        {
            "band_source": source,
            "income_value": value,
            "band_index": band_index,
            "estimate_low": np.where(observed, np.nan, low),
            "estimate_high": np.where(observed, np.nan, high),
            "band_confidence": np.where(observed, np.nan, confidence),
        },
        index=estimate.index,
    )
