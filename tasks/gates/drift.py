"""The drift gate: has the population, the label or the band mix moved since the last published month,
and does last month's model still hold on this month's labels?

Population stability index (PSI) of each model feature, of the salary label and of the band shares,
against the latest published snapshot of an earlier month:
    PSI = sum over bins of (this - last) * ln(this / last)
with bins at the earlier month's deciles (open at both ends) for numbers, and the bands themselves for
the band shares; an empty bin counts as half a customer so the logarithm stays finite. Rule of thumb
(common practice in credit scoring, from memory): below 0.10 stable, 0.10-0.25 moderate, above 0.25
large. Each run stores its own bins (ml.drift_profiles), so the next month compares with exactly what
was published.

Out of time: last month's published model scores this month's labelled customers; its MAE against
the MAE its own cross-validation promised says whether the model ages well.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from prefect import task
from prefect.cache_policies import NO_CACHE

from ledgerband.tasks.core.context import RunContext
from ledgerband.tasks.core.queries import run_query
from ledgerband.tasks.core.warehouse import open_warehouse
from ledgerband.tasks.gates import Decision, enforce
from ledgerband.tasks.modeling.amounts import never_negative

DRIFT = "drift"
LABEL = "label:annual_salary"
BANDS = "band_shares"


def quantile_edges(values: np.ndarray, bins: int) -> np.ndarray:
    """Inner edges at the quantiles of `values` (duplicates dropped): bins-1 edges at most."""
    values = values[np.isfinite(values)]
    if len(values) == 0:
        return np.array([])
    return np.unique(np.quantile(values, np.linspace(0, 1, bins + 1)[1:-1]))


def shares(values: np.ndarray, edges: np.ndarray) -> np.ndarray:
    """Share of finite `values` in each bin (-inf, e1), [e1, e2), ..., [ek, inf)."""
    values = values[np.isfinite(values)]
    counts = np.bincount(np.searchsorted(edges, values, side="right"), minlength=len(edges) + 1)
    return counts / max(len(values), 1)


def psi(expected: np.ndarray, actual: np.ndarray, n_expected: int, n_actual: int) -> float:
    """Population stability index; an empty bin counts as half a customer."""
    e = np.maximum(np.asarray(expected, float), 0.5 / max(n_expected, 1))
    a = np.maximum(np.asarray(actual, float), 0.5 / max(n_actual, 1))
    return float(np.sum((a - e) * np.log(a / e)))


def profile(
    frame: pd.DataFrame, features: list[str], band_index: np.ndarray, n_bands: int, bins: int
) -> pd.DataFrame:
    """This run's bins and shares: each feature, the label (labelled customers), the band shares."""
    rows = []

    def add(subject: str, values: np.ndarray, edges: np.ndarray | None = None, n: int | None = None):
        edges = quantile_edges(values, bins) if edges is None else edges
        s = shares(values, edges)
        lower = np.r_[-np.inf, edges]
        upper = np.r_[edges, np.inf]
        for i in range(len(s)):
            rows.append(
                {
                    "subject": subject,
                    "bin_index": i,
                    "lower_edge": lower[i],
                    "upper_edge": upper[i],
                    "share": s[i],
                    "customers": int(n if n is not None else np.isfinite(values).sum()),
                }
            )

    for f in features:
        add(f, frame[f].to_numpy(dtype=float))
    add(LABEL, frame["annual_salary"].to_numpy(dtype=float))
    add(BANDS, band_index.astype(float), np.arange(1, n_bands, dtype=float))
    return pd.DataFrame(rows)


def compare_profiles(earlier: pd.DataFrame, frame: pd.DataFrame, band_index: np.ndarray) -> pd.DataFrame:
    """PSI of each subject of `earlier` (a stored profile), with this month's values in its bins."""
    out = []
    for subject, bins in earlier.groupby("subject", sort=False):
        bins = bins.sort_values("bin_index")
        edges = bins["lower_edge"].to_numpy()[1:]
        if subject == BANDS:
            values = band_index.astype(float)
        elif subject == LABEL:
            values = frame["annual_salary"].to_numpy(dtype=float)
        elif subject in frame.columns:
            values = frame[subject].to_numpy(dtype=float)
        else:
            continue  # a feature no longer used
        now = shares(values, edges)
        n_now = int(np.isfinite(values).sum())
        out.append(
            {
                "subject": subject,
                "psi": psi(bins["share"].to_numpy(), now, int(bins["customers"].iloc[0]), n_now),
                "customers_then": int(bins["customers"].iloc[0]),
                "customers_now": n_now,
            }
        )
    return pd.DataFrame(out, columns=["subject", "psi", "customers_then", "customers_now"])


def drift_decision(
    drift: pd.DataFrame, out_of_time: dict | None, earlier_period: str | None, settings
) -> Decision:
    """Stop when any PSI reaches drift.psi_stop; warn at drift.psi_warn or when last month's model aged."""
    d = settings.drift
    thresholds = d.model_dump()
    if earlier_period is None or drift.empty:
        return Decision(DRIFT, "drift", True, "no earlier published month to compare with", {}, thresholds)
    figures = {
        "compared_with": earlier_period,
        "psi": dict(zip(drift["subject"], drift["psi"].round(4), strict=True)),
        "largest_psi": float(drift["psi"].max()),
        "largest_psi_subject": str(drift.loc[drift["psi"].idxmax(), "subject"]),
        "out_of_time": out_of_time,
    }
    stop = drift[drift["psi"] >= d.psi_stop]
    warn = drift[(drift["psi"] >= d.psi_warn) & (drift["psi"] < d.psi_stop)]
    if len(stop):
        return Decision(
            DRIFT,
            "drift",
            False,
            f"since {earlier_period}, PSI >= drift.psi_stop {d.psi_stop}: {_words(stop)}. What would change the "
            "answer: confirm the change is real (a new product, a re-sent extract) and raise drift.psi_stop for "
            "this run, or fix the feed",
            figures,
            thresholds,
        )
    notes = []
    if len(warn):
        notes.append(f"moderate drift since {earlier_period} (PSI >= {d.psi_warn}): {_words(warn)}")
    if (
        out_of_time
        and out_of_time.get("mae_rise") is not None
        and out_of_time["mae_rise"] > d.max_out_of_time_mae_rise
    ):
        notes.append(
            f"last month's model is {out_of_time['mae_rise']:.0%} worse on this month's labels than its "
            f"cross-validation said (> drift.max_out_of_time_mae_rise {d.max_out_of_time_mae_rise:.0%})"
        )
    if notes:
        return Decision(
            DRIFT, "drift", True, "warning: " + "; ".join(notes), figures, thresholds, warning=True
        )
    return Decision(
        DRIFT,
        "drift",
        True,
        f"stable since {earlier_period}: largest PSI {figures['largest_psi']:.3f} ({figures['largest_psi_subject']})",
        figures,
        thresholds,
    )


def _words(rows: pd.DataFrame) -> str:
    return ", ".join(f"{s} {p:.3f}" for s, p in zip(rows["subject"], rows["psi"], strict=True))


def earlier_snapshot(con, period: str) -> tuple[str, str, str] | None:
    """(run_id, period, model_version) of the latest published snapshot of an earlier month."""
    rows = run_query(con, "gates", "earlier_snapshot", period=period).fetchall()
    return rows[0] if rows else None


def out_of_time_check(con, ctx: RunContext, earlier_run: str, earlier_period: str) -> dict | None:
    """Last month's champion on this month's labelled customers: MAE now vs its cross-validated MAE."""
    from ledgerband.tasks.modeling.train import load_champion, model_frame

    path = ctx.settings.models_dir / earlier_period / earlier_run / "model.skops"
    cv = con.execute(
        "select mae_mean, model_sha256 from ml.model_runs where run_id = ? and is_champion", [earlier_run]
    ).fetchall()
    if not path.is_file() or not cv:
        return None
    if cv[0][1] is None:  # saved before checksums were kept: it cannot be verified, so it is not loaded
        _warn(f"out-of-time check skipped: {path} has no recorded checksum")
        return None
    model, card = load_champion(con, ctx.settings.models_dir, earlier_run)  # refuses a changed file
    frame = model_frame(con)
    labelled = frame[frame["annual_salary"].notna()]
    if labelled.empty:
        return None
    pred = never_negative(model.predict(labelled[card["features"]]))
    mae = float(np.mean(np.abs(pred - labelled["annual_salary"].to_numpy(dtype=float))))
    return {
        "model_version": card.get("model_version"),
        "mae_now": mae,
        "mae_cross_validated": float(cv[0][0]),
        "mae_rise": mae / float(cv[0][0]) - 1 if cv[0][0] else None,
        "customers": int(len(labelled)),
    }


def store_profile(con, ctx: RunContext, frame: pd.DataFrame, band_index: np.ndarray) -> None:
    """This run's bins and shares (features, label, bands) in ml.drift_profiles: what a later month's
    drift check compares itself with."""
    settings = ctx.settings
    rows = profile(
        frame,
        list(settings.train.numeric_features),
        band_index,
        len(settings.bands.edges) + 1,
        settings.drift.bins,
    )
    con.execute("delete from ml.drift_profiles where run_id = ?", [ctx.run_id])
    con.register("profile_rows", rows.assign(run_id=ctx.run_id))
    con.execute("insert into ml.drift_profiles by name select * from profile_rows")
    con.unregister("profile_rows")


def check_drift(con, ctx: RunContext) -> Decision:
    """Store this run's profile; compare it with the latest earlier published month (the PSI table in
    ml.drift) and last month's model on this month's labels."""
    from ledgerband.tasks.modeling.train import model_frame

    con.execute("delete from ml.drift where run_id = ?", [ctx.run_id])
    frame = model_frame(con)
    bands = np.asarray(
        con.execute(
            "select band_index from ml.predictions where run_id = ? order by customer_id", [ctx.run_id]
        ).fetchnumpy()["band_index"]
    )
    store_profile(con, ctx, frame, bands)
    earlier = earlier_snapshot(con, str(ctx.period))
    if earlier is None:
        return drift_decision(pd.DataFrame(), None, None, ctx.settings)
    earlier_run, earlier_period, _ = earlier
    stored = con.execute(
        "select subject, bin_index, lower_edge, upper_edge, share, customers from ml.drift_profiles "
        "where run_id = ?",
        [earlier_run],
    ).df()
    if stored.empty:
        return drift_decision(pd.DataFrame(), None, None, ctx.settings)
    drift = compare_profiles(stored, frame, bands)
    con.register("drift_rows", drift.assign(run_id=ctx.run_id, compared_with_run=earlier_run))
    con.execute("insert into ml.drift by name select * from drift_rows")
    con.unregister("drift_rows")
    return drift_decision(
        drift, out_of_time_check(con, ctx, earlier_run, earlier_period), earlier_period, ctx.settings
    )


@task(name="drift-gate", task_run_name="drift-gate-{ctx.period}", cache_policy=NO_CACHE)
def drift_gate_task(ctx: RunContext) -> Decision:
    """Decide whether the month moved too far from the last published one (never retried)."""
    with open_warehouse(ctx.warehouse, ctx.settings.scale) as con:
        return enforce(con, ctx, check_drift(con, ctx))


def _warn(message: str) -> None:
    try:
        from prefect import get_run_logger

        get_run_logger().warning(message)
    except Exception:  # outside a flow run there is no run log
        pass
