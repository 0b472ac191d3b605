"""Benchmark: training with intervals at 10k and 100k labelled customers. Run with `make bench`.

BENCH_LABELLED (default "10000,100000") lists the sizes. The frame has the production feature columns,
drawn so that income depends on them non-linearly with noise; the goal is at most 60 s at 100k with
intervals on 2 cores. Prints the seconds of each part: the comparison, held-out coverage, the learning
curve, and the final refit with conformal intervals for every customer.
"""

from __future__ import annotations

import os
import time

import numpy as np
import pandas as pd


def _frame(n: int, seed: int = 1) -> tuple[pd.DataFrame, np.ndarray]:
    rng = np.random.default_rng(seed)
    capacity = rng.lognormal(np.log(40_000), 0.4, n)
    spend = capacity / 12 * rng.lognormal(0, 0.25, n) * 3
    X = pd.DataFrame(
        {
            "debits_per_week": rng.poisson(6 + 4 * np.sqrt(capacity / 40_000), n) / 1.0,
            "largest_debit": spend * rng.uniform(0.1, 0.3, n),
            "count_large_debits": rng.poisson(10 * capacity / 40_000, n) / 1.0,
            "days_with_debit": rng.integers(30, 90, n) / 1.0,
            "mean_debit_amount": spend / rng.integers(40, 120, n),
            "median_balance": 2_000 * (capacity / 40_000) ** 0.6 * rng.lognormal(0, 0.9, n),
            "total_debit_amount": spend,
            "top_merchant_region": rng.choice(["north", "south", "east", "west", "none"], n),
            "home_region": rng.choice(["north", "south", "east", "west"], n),
        }
    )
    return X, capacity * rng.lognormal(-0.011, 0.15, n)


def test_training_with_intervals_at_scale():
    from ledgerband.tasks.core.settings import Settings
    from ledgerband.tasks.modeling.candidates import make_candidates
    from ledgerband.tasks.modeling.intervals import fit_conformal, predict_intervals
    from ledgerband.tasks.modeling.train import evaluate

    settings = Settings()
    sizes = [int(x) for x in os.environ.get("BENCH_LABELLED", "10000,100000").split(",")]
    features = list(settings.train.numeric_features) + list(settings.train.categorical_features)
    for n in sizes:
        X, y = _frame(n)
        everyone, _ = _frame(int(n * 1.25), seed=2)
        t0 = time.perf_counter()
        ev = evaluate(X[features], y, settings)
        t1 = time.perf_counter()
        pipe = make_candidates(settings)[ev.comparison.champion]
        conformal = fit_conformal(pipe, X[features], y, settings)
        pipe.fit(X[features], y)
        predict_intervals(conformal, everyone[features])
        t2 = time.perf_counter()
        print(
            f"\nbench train: {n:,} labelled (compared on {ev.n_compared:,}), champion {ev.comparison.champion}, "
            f"MAE skill {ev.skill.mae_skill.mean:.1%}, coverage {ev.coverage:.1%}"
        )
        print(f"  evaluate (compare + held-out coverage + learning curve) {t1 - t0:7.1f} s")
        print(f"  final refit + conformal intervals for {len(everyone):,}     {t2 - t1:7.1f} s")
        print(f"  total                                                   {t2 - t0:7.1f} s")
