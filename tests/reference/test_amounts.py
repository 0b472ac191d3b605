"""The one rule for rounding published figures, against a reference implementation: DuckDB's own round().

Band confidence used to be rounded by `round(x, 2)` in the publish SQL; it is now rounded once in Python
(tasks/modeling/amounts.py). Source: DuckDB's documented round(v, s) ("round to s decimal places"),
which rounds the value a double holds exactly, halves away from zero, unlike numpy's round (halves to
even, numpy documentation of numpy.round). The two must agree on every value, halves included.
"""

from __future__ import annotations

import duckdb
import numpy as np

from ledgerband.tasks.modeling.amounts import never_negative, round_half_away


def _duckdb_round(values: np.ndarray, decimals: int) -> np.ndarray:
    con = duckdb.connect()
    con.register("v", {"x": values})
    got = con.execute(f"select round(x, {decimals}) from v").fetchnumpy()
    return np.asarray(got[next(iter(got))], dtype=float)


def test_two_decimal_rounding_equals_duckdb_round_on_halves_and_random_shares():
    rng = np.random.default_rng(20261205)
    halves = np.array([0.005, 0.015, 0.125, 0.245, 0.375, 0.5, 0.625, 0.875, 0.995, 1.0, 0.0])
    quarters = np.arange(0, 4001) / 4000  # shares of a 4,000-unit interval: many halves, exact and not
    thousandths = np.arange(0, 1001) / 1000
    shares = np.concatenate([halves, quarters, thousandths, rng.uniform(0, 1, 50_000)])
    np.testing.assert_array_equal(round_half_away(shares, 2), _duckdb_round(shares, 2))
    # numpy's own rounding would not do: it sends 0.125 to 0.12, DuckDB (and we) to 0.13
    assert round_half_away(np.array([0.125]), 2)[0] == 0.13 != np.round(0.125, 2)


def test_negative_estimates_become_zero_and_nothing_else_moves():
    np.testing.assert_array_equal(never_negative([-5.0, 0.0, 3.5]), [0.0, 0.0, 3.5])
