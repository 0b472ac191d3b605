"""The demo's truth check: only a synthetic bank knows every customer's true income."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from ledgerband.tasks.core.queries import run_query
from ledgerband.tasks.modeling.bands import assign_band_index


def truth_check(con, answers_path: Path, run_id: str, edges: tuple[float, ...]) -> dict:
    """Demo only: compare a run's estimates with the true incomes the generator wrote.

    Cross-validation can only measure customers whose salary is paid here; the customers the model is
    for (self-employed, pensioners, paid elsewhere) are measured here, which only a synthetic bank allows.
    """
    answers = pd.read_csv(answers_path, dtype={"customer_id": str})
    pred = run_query(con, "demo", "run_estimates", run_id=run_id).df()
    m = pred.merge(answers, on="customer_id")
    estimated = m[m["annual_salary"].isna() & m["observed_pension"].isna()]
    labelled = m[m["annual_salary"].notna()]

    def floor(frame: pd.DataFrame) -> float:
        # No model of behaviour beats knowing the behaviour signal; what is left is the floor.
        return float(np.sqrt(np.mean(frame["irreducible_noise"] ** 2))) if len(frame) else float("nan")

    err = estimated["estimate"] - estimated["true_annual_income"]
    t = assign_band_index(estimated["true_annual_income"], edges)
    p = assign_band_index(estimated["estimate"], edges)
    return {
        "customers_estimated": int(len(estimated)),
        "rmse": float(np.sqrt(np.mean(err**2))) if len(err) else float("nan"),
        "mae": float(np.mean(np.abs(err))) if len(err) else float("nan"),
        "mean_error": float(err.mean()) if len(err) else float("nan"),
        "mean_true_income": float(estimated["true_annual_income"].mean()) if len(err) else float("nan"),
        "error_floor_rmse": floor(estimated),
        "labelled_error_floor_rmse": floor(labelled),
        "band_accuracy": float(np.mean(t == p)) if len(err) else float("nan"),
        "within_one_band": float(np.mean(np.abs(t - p) <= 1)) if len(err) else float("nan"),
        # The intervals on the customers they are for (cross-validation can only check the labelled).
        "interval_coverage": float(
            np.mean(
                (estimated["true_annual_income"] >= estimated["estimate_low"])
                & (estimated["true_annual_income"] <= estimated["estimate_high"])
            )
        )
        if len(err)
        else float("nan"),
    }


def label_agreement(con, answers_path: Path, tolerance: float = 0.02) -> dict:
    """Demo only: the salary labels against the true net pay the generator wrote, overall and by group.

    A label is right when within `tolerance` of the true net pay, wrong when further off. Counts:
    salaried customers paid at the window's end; of them those whose pay a careful reader can label
    (`label_expected`: each current job shows its calendar, coded or from an employer of three or more);
    and customers without current pay who were given a label anyway.
    """
    answers = pd.read_csv(answers_path, dtype={"customer_id": str})
    labels = con.execute("select customer_id, label_status, annual_salary from features.customer_label").df()
    m = answers.merge(labels, on="customer_id", how="left")
    labelled = m["label_status"].eq("labelled")
    off = (m["annual_salary"] / m["true_net_pay"] - 1).abs()
    m["outcome"] = np.select(
        [labelled & (off <= tolerance), labelled & ~(off <= tolerance)], ["right", "wrong"], default="none"
    )
    salaried = m[m["true_net_pay"].notna()]
    expected = salaried[salaried["label_expected"]]
    unpaid = m[m["true_net_pay"].isna()]

    def shares(frame: pd.DataFrame) -> dict:
        n = len(frame)
        counts = frame["outcome"].value_counts()
        return {
            "customers": n,
            **{k: (int(counts.get(k, 0)) / n if n else float("nan")) for k in ("right", "wrong", "none")},
        }

    def by(column: str) -> dict:
        # Customers with several current jobs (calendars joined by '+') are one group, not one per mix.
        key = (
            salaried[column]
            .astype(str)
            .where(~salaried[column].astype(str).str.contains("+", regex=False), "several_jobs")
        )
        return {str(k): shares(g) for k, g in salaried.groupby(key)}

    return {
        "salaried": shares(salaried),
        "label_expected": shares(expected),
        "without_current_pay_labelled": float(labelled[m["true_net_pay"].isna()].mean())
        if len(unpaid)
        else 0.0,
        "without_current_pay": int(len(unpaid)),
        "by_pattern": by("pay_pattern"),
        "by_life_event": by("life_event"),
    }
