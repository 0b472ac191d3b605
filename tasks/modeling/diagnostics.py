"""How far to trust the estimates: error by group, how unlike the labelled customers the estimated ones
are, and what more labelled customers would buy (learning curve). Pure functions of frames.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from fairlearn.metrics import MetricFrame, count
from sklearn.base import clone
from sklearn.ensemble import HistGradientBoostingClassifier
from sklearn.metrics import mean_absolute_error, roc_auc_score
from sklearn.model_selection import StratifiedKFold, cross_val_predict, learning_curve
from sklearn.pipeline import Pipeline

from ledgerband.tasks.core.settings import Settings
from ledgerband.tasks.modeling.bands import assign_band_index
from ledgerband.tasks.modeling.candidates import preparation

AGE_BANDS = ([0, 30, 45, 60, 200], ["under 30", "30 to 44", "45 to 59", "60 and over"])
GROUP_ATTRIBUTES = ("sex", "age_band", "home_region")


def age_band(age_years: pd.Series) -> pd.Series:
    edges, labels = AGE_BANDS
    return pd.cut(age_years, edges, right=False, labels=labels).astype("string").fillna("unknown")


def group_errors(
    frame: pd.DataFrame,
    y: np.ndarray,
    estimate: np.ndarray,
    low: np.ndarray,
    high: np.ndarray,
    settings: Settings,
) -> tuple[pd.DataFrame, dict]:
    """Out-of-fold MAE, signed error, band accuracy and interval coverage by sex, age band and region.

    Computed with Fairlearn's MetricFrame, one attribute at a time. Groups with fewer customers than
    accuracy.min_group_customers are listed but left out of the gap (max minus min across groups).
    """
    edges = settings.bands.edges

    def mean_error(y_true, y_pred):
        return float(np.mean(np.asarray(y_pred) - np.asarray(y_true)))

    def band_accuracy(y_true, y_pred):
        return float(np.mean(assign_band_index(y_true, edges) == assign_band_index(y_pred, edges)))

    def coverage(y_true, y_pred, low, high):
        y_true = np.asarray(y_true)
        return float(np.mean((y_true >= np.asarray(low)) & (y_true <= np.asarray(high))))

    attributes = pd.DataFrame(
        {
            "sex": frame["sex"].astype("string").fillna("unknown").to_numpy(),
            "age_band": age_band(frame["age_years"]).to_numpy(),
            "home_region": frame["home_region"].astype("string").fillna("unknown").to_numpy(),
        }
    )
    rows, gaps = [], {}
    for attribute in GROUP_ATTRIBUTES:
        mf = MetricFrame(
            metrics={
                "customers": count,
                "mae": mean_absolute_error,
                "mean_error": mean_error,
                "band_accuracy": band_accuracy,
                "coverage": coverage,
            },
            y_true=y,
            y_pred=estimate,
            sensitive_features=attributes[attribute],
            sample_params={"coverage": {"low": low, "high": high}},
        )
        table = mf.by_group.reset_index().rename(columns={attribute: "group_name"})
        table.insert(0, "attribute", attribute)
        table["in_gap"] = table["customers"] >= settings.accuracy.min_group_customers
        rows.append(table)
        measured = table[table["in_gap"]]
        gaps[attribute] = {
            metric: float(measured[metric].max() - measured[metric].min()) if len(measured) > 1 else 0.0
            for metric in ("mae", "mean_error", "band_accuracy", "coverage")
        }
    out = pd.concat(rows, ignore_index=True)
    out["customers"] = out["customers"].astype("int64")
    largest = max(
        ((a, g["band_accuracy"]) for a, g in gaps.items()), key=lambda item: item[1], default=(None, 0.0)
    )
    return out, {
        "by_attribute": gaps,
        "largest_band_accuracy_gap": largest[1],
        "largest_gap_attribute": largest[0],
        "worst_coverage": float(out.loc[out["in_gap"], "coverage"].min()) if out["in_gap"].any() else None,
    }


@dataclass
class Shift:
    table: pd.DataFrame  # feature, labelled_mean, estimated_mean, standardised_difference
    auc: float | None
    n_labelled: int
    n_estimated: int


def population_shift(labelled: pd.DataFrame, estimated: pd.DataFrame, settings: Settings) -> Shift:
    """How unlike the customers the model is applied to are the customers it was measured on.

    Per numeric feature the standardised mean difference (difference of means over the pooled standard
    deviation; |d| > 0.1 is the usual mark of imbalance, Austin 2009, Statistics in Medicine 28:3083),
    and the cross-validated AUC of a classifier telling the two groups apart (0.5: indistinguishable).
    """
    t = settings.train
    rows = []
    for feature in t.numeric_features:
        a = labelled[feature].astype(float)
        b = estimated[feature].astype(float)
        pooled = np.sqrt((a.var(ddof=1) + b.var(ddof=1)) / 2) if len(a) > 1 and len(b) > 1 else np.nan
        diff = (b.mean() - a.mean()) / pooled if pooled and np.isfinite(pooled) and pooled > 0 else np.nan
        rows.append(
            {
                "feature": feature,
                "labelled_mean": float(a.mean()),
                "estimated_mean": float(b.mean()) if len(b) else np.nan,
                "standardised_difference": float(diff),
            }
        )
    table = pd.DataFrame(rows)
    auc = None
    if len(labelled) >= 10 and len(estimated) >= 10:
        rng = np.random.default_rng(t.random_state)
        cap = t.max_cv_customers

        def sample(df: pd.DataFrame) -> pd.DataFrame:
            return df.iloc[np.sort(rng.choice(len(df), cap, replace=False))] if len(df) > cap else df

        features = list(t.numeric_features) + list(t.categorical_features)
        both = pd.concat([sample(labelled)[features], sample(estimated)[features]], ignore_index=True)
        target = np.r_[np.zeros(min(len(labelled), cap)), np.ones(min(len(estimated), cap))]
        clf = Pipeline(
            [
                ("prepare", preparation(t)),
                ("model", HistGradientBoostingClassifier(random_state=t.random_state)),
            ]
        )
        folds = min(5, int(min(target.sum(), len(target) - target.sum())))
        if folds >= 2:
            cv = StratifiedKFold(folds, shuffle=True, random_state=t.random_state)
            proba = cross_val_predict(clf, both, target, cv=cv, method="predict_proba")[:, 1]
            auc = float(roc_auc_score(target, proba))
    return Shift(table, auc, len(labelled), len(estimated))


@dataclass
class LearningCurve:
    table: pd.DataFrame  # n_train, mae_mean, mae_std
    baseline_mae: float
    flattened: bool
    customers_needed: int | None  # labelled customers the MAE-skill threshold would need (rough guide)
    advice: str


def learning_curve_of(
    pipe: Pipeline,
    X: pd.DataFrame,
    y: np.ndarray,
    splits,
    baseline_mae: float,
    target_skill: float,
    n_labelled: int,
    n_jobs: int = 1,
) -> LearningCurve:
    """Held-out MAE of the champion against the number of customers it learns from.

    `splits` are one repeat's folds. `target_skill` is the MAE skill the gate would need on average
    (threshold plus the current gap between the mean and its lower bound). The projection fits a power
    law to the last three points: a rough guide, stated as such.
    """
    sizes, _, test = learning_curve(
        clone(pipe),
        X,
        y,
        train_sizes=[0.1, 0.2, 0.35, 0.5, 0.75, 1.0],
        cv=splits,
        scoring="neg_mean_absolute_error",
        shuffle=True,
        random_state=0,
        n_jobs=n_jobs,  # worker processes; each size and fold is seeded, so the curve is the same
    )
    mae = -test
    table = pd.DataFrame({"n_train": sizes, "mae_mean": mae.mean(axis=1), "mae_std": mae.std(axis=1, ddof=1)})
    tail = table.tail(3)
    slope = float(np.polyfit(np.log(tail["n_train"]), np.log(tail["mae_mean"]), 1)[0])
    last = table.iloc[-1]
    # Flattened: doubling the customers would cut the MAE by less than 1%.
    flattened = bool(slope > np.log2(0.99))
    target_mae = baseline_mae * (1 - target_skill)
    needed = None
    if last["mae_mean"] <= target_mae:
        advice = "the learning curve already meets the MAE-skill threshold at this size"
    elif flattened:
        advice = (
            "the learning curve has flattened: more labelled customers will not help; better features or "
            "a better-suited population would"
        )
    else:
        growth = (target_mae / last["mae_mean"]) ** (1 / slope)
        n_now = int(last["n_train"])
        projected = int(np.ceil(growth * n_labelled / 100) * 100)
        if growth > 20:
            advice = (
                f"the curve is too flat to reach the threshold within 20 times the {n_labelled:,} labelled "
                "customers: more customers alone will not do it"
            )
        else:
            needed = projected
            advice = (
                f"about {needed:,} labelled customers would reach the MAE-skill threshold (a power law "
                f"through the learning curve's last three points, from {n_now:,} training customers)"
            )
    return LearningCurve(table, float(baseline_mae), flattened, needed, advice)
