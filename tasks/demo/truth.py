"""The demo's truth check: only a synthetic bank knows every customer's true income."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
from ledgerband.tasks.bands import assign_band_index


def truth_check(con, answers_path: Path, run_id: str, edges: tuple[float, ...]) -> dict:
    """Demo only: compare a run's estimates with the true incomes the generator wrote.

    Cross-validation can only measure customers whose salary is paid here; the customers the model is
    for (self-employed, pensioners, paid elsewhere) are measured here, which only a synthetic bank allows.
    """
    answers = pd.read_csv(answers_path, dtype={"customer_id": str})
    pred = con.execute(
        "select customer_id, estimate, annual_salary from ml.predictions where run_id = ?", [run_id]
    ).df()
    m = pred.merge(answers, on="customer_id")
    estimated = m[m["annual_salary"].isna()]
    err = estimated["estimate"] - estimated["true_annual_income"]
    t = assign_band_index(estimated["true_annual_income"], edges)
    p = assign_band_index(estimated["estimate"], edges)
    return {
        "customers_estimated": int(len(estimated)),
        "rmse": float(np.sqrt(np.mean(err**2))) if len(err) else float("nan"),
        "mae": float(np.mean(np.abs(err))) if len(err) else float("nan"),
        "mean_error": float(err.mean()) if len(err) else float("nan"),
        "mean_true_income": float(estimated["true_annual_income"].mean()) if len(err) else float("nan"),
        "band_accuracy": float(np.mean(t == p)) if len(err) else float("nan"),
        "within_one_band": float(np.mean(np.abs(t - p) <= 1)) if len(err) else float("nan"),
    }
