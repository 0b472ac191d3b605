"""The run report's pictures: matplotlib drawn to inline SVG, so the page stays one offline file.

Every figure has a title, axis labels with units and a one-line "how to read this". Colours are the
Okabe-Ito palette (distinguishable with the common colour-vision deficiencies), and no colour carries
meaning alone: series also differ by hatch or marker, and every bar chart has a legend or labels.
Figures are drawn only from what the run stored in ml.* and published.*; a figure whose figures do not
exist for this run (no drift before a second month) is left out with the reason.
"""

from __future__ import annotations

import io
from dataclasses import dataclass

import duckdb
import numpy as np

from ledgerband.tasks.core.queries import run_query

# Okabe & Ito (2008), "Color Universal Design": black, orange, sky blue, bluish green, yellow, blue,
# vermillion, reddish purple.
PALETTE = ["#000000", "#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7"]
HATCHES = ["", "//", "..", "xx", "\\\\", "++", "oo", "--"]
MAX_POINTS = 3_000


@dataclass
class Figure:
    key: str
    title: str
    how_to_read: str
    svg: str | None  # None: not drawn in this run (see `missing`)
    missing: str | None = None


def _svg(fig) -> str:
    import matplotlib.pyplot as plt

    buf = io.StringIO()
    fig.savefig(buf, format="svg", bbox_inches="tight")
    plt.close(fig)
    text = buf.getvalue()
    return text[text.index("<svg") :]  # drop the XML prolog: the SVG sits inside the HTML page


def _new(width: float = 6.4, height: float = 4.0):
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    plt.rcParams.update(
        {"svg.fonttype": "none", "font.size": 9, "axes.prop_cycle": plt.cycler(color=PALETTE)}
    )
    return plt.subplots(figsize=(width, height))


def _money(ax, axis: str = "both") -> None:
    from matplotlib.ticker import FuncFormatter

    fmt = FuncFormatter(lambda v, _: f"{v / 1000:,.0f}k")
    if axis in ("x", "both"):
        ax.xaxis.set_major_formatter(fmt)
    if axis in ("y", "both"):
        ax.yaxis.set_major_formatter(fmt)


def draw_all(con: duckdb.DuckDBPyConnection, run_id: str, currency: str, edges) -> list[Figure]:
    out = []
    held = con.execute(
        "select annual_salary, oof_estimate from ml.predictions where run_id = ? and oof_estimate is not null",
        [run_id],
    ).fetchnumpy()
    y, p = held["annual_salary"], held["oof_estimate"]
    if len(y):
        # Scatter plots show at most MAX_POINTS customers (a fixed random sample: the page stays small);
        # the confusion matrix counts everyone.
        shown = (
            np.sort(np.random.default_rng(0).choice(len(y), MAX_POINTS, replace=False))
            if len(y) > MAX_POINTS
            else slice(None)
        )
        note = f" (a random {MAX_POINTS:,} of {len(y):,} shown)" if len(y) > MAX_POINTS else ""
        out.append(_predicted_vs_observed(y[shown], p[shown], currency, note))
        out.append(_residuals(y[shown], p[shown], currency, note))
        out.append(_confusion(y, p, edges))
    else:
        for key, title in (
            ("predicted_vs_observed", "Estimated vs observed salary"),
            ("residuals", "Error against observed salary"),
            ("band_confusion", "Observed band vs estimated band"),
        ):
            out.append(Figure(key, title, "", None, "no model was trained in this run"))
    out.append(_per_band_by_source(con, run_id))
    out.append(_band_shares_by_region(con, run_id))
    out.append(_learning_curve(con, run_id, currency))
    out.append(_coverage(con, run_id))
    out.append(_drift(con, run_id))
    out.append(_movers(con, run_id))
    return out


def _predicted_vs_observed(y, p, currency, note: str = "") -> Figure:
    fig, ax = _new(5.2, 4.6)
    ax.scatter(y, p, s=6, alpha=0.45, color=PALETTE[5], marker="o", label="customer (held out)")
    top = float(np.nanpercentile(np.r_[y, p], 99.5))
    ax.plot([0, top], [0, top], color=PALETTE[6], linestyle="--", linewidth=1.2, label="estimate = observed")
    ax.set_xlim(0, top)
    ax.set_ylim(0, top)
    ax.set_xlabel(f"observed annual salary ({currency})")
    ax.set_ylabel(f"estimate when held out ({currency})")
    ax.set_title("Estimated vs observed salary (held-out folds)" + note)
    ax.legend(loc="upper left", frameon=False)
    _money(ax)
    return Figure(
        "predicted_vs_observed",
        "Estimated vs observed salary",
        "Each dot is a labelled customer estimated by a model that never saw them; dots on the dashed line are "
        "exact, dots below it are underestimated.",
        _svg(fig),
    )


def _residuals(y, p, currency, note: str = "") -> Figure:
    fig, ax = _new(6.0, 3.8)
    ax.scatter(y, p - y, s=6, alpha=0.45, color=PALETTE[3], marker="s", label="estimate minus observed")
    ax.axhline(0, color=PALETTE[0], linewidth=1, linestyle="--", label="no error")
    ax.set_xlim(0, float(np.nanpercentile(y, 99.5)))
    ax.set_xlabel(f"observed annual salary ({currency})")
    ax.set_ylabel(f"estimate minus observed ({currency})")
    ax.set_title("Error against observed salary (held-out folds)" + note)
    ax.legend(loc="upper right", frameon=False)
    _money(ax)
    return Figure(
        "residuals",
        "Error against observed salary",
        "Above zero the model overestimates, below it underestimates; a slope down to the right means high "
        "earners are pulled towards the average.",
        _svg(fig),
    )


def _confusion(y, p, edges) -> Figure:
    from ledgerband.tasks.modeling.bands import assign_band_index

    n = len(edges) + 1
    t, e = assign_band_index(y, edges), assign_band_index(p, edges)
    counts = np.zeros((n, n), dtype=int)
    np.add.at(counts, (t, e), 1)
    shares = counts / np.maximum(counts.sum(axis=1, keepdims=True), 1)
    fig, ax = _new(5.2, 4.6)
    ax.imshow(shares, cmap="Blues", vmin=0, vmax=1)
    for i in range(n):
        for j in range(n):
            if counts[i, j]:
                ax.text(
                    j,
                    i,
                    f"{counts[i, j]}\n{shares[i, j]:.0%}",
                    ha="center",
                    va="center",
                    fontsize=7,
                    color="white" if shares[i, j] > 0.55 else "black",
                )
    labels = [f"B{i + 1}" for i in range(n)]
    ax.set_xticks(range(n), labels)
    ax.set_yticks(range(n), labels)
    ax.set_xlabel("estimated band (held out)")
    ax.set_ylabel("observed band")
    ax.set_title("Observed band vs estimated band (customers, row share)")
    return Figure(
        "band_confusion",
        "Observed band vs estimated band",
        "Each row is an observed band: the diagonal holds the customers placed right (count and share of the "
        "row); cells next to it are one band off.",
        _svg(fig),
    )


def _per_band_by_source(con, run_id) -> Figure:
    rows = run_query(con, "report", "band_source_customers", run_id=run_id).fetchall()
    bands = sorted({r[0] for r in rows})
    sources = [
        s for s in ("observed_salary", "observed_pension", "model_estimate") if any(r[1] == s for r in rows)
    ]
    if not sources:
        return Figure("band_by_source", "Customers per band by source", "", None, "nothing was published")
    fig, ax = _new()
    bottom = np.zeros(len(bands))
    for k, source in enumerate(sources):
        values = np.array([sum(r[2] for r in rows if r[0] == b and r[1] == source) for b in bands])
        ax.bar(
            bands,
            values,
            bottom=bottom,
            label=source,
            color=PALETTE[(k * 2 + 1) % 8],
            hatch=HATCHES[k],
            edgecolor="black",
            linewidth=0.4,
        )
        bottom += values
    ax.set_xlabel("income band")
    ax.set_ylabel("customers")
    ax.set_title("Customers per band by source")
    ax.legend(frameon=False)
    return Figure(
        "band_by_source",
        "Customers per band by source",
        "Bar height is the band's customers; the segments say how many are banded on observed pay, an "
        "observed pension, or the model's estimate.",
        _svg(fig),
    )


def _band_shares_by_region(con, run_id) -> Figure:
    rows = run_query(con, "report", "region_band_customers", run_id=run_id).fetchall()
    if not rows:
        return Figure("band_by_region", "Band shares by region", "", None, "nothing was published")
    regions = sorted({r[0] for r in rows})
    bands = sorted({r[1] for r in rows})
    fig, ax = _new(6.4, 0.45 * len(regions) + 1.6)
    left = np.zeros(len(regions))
    totals = np.array([sum(r[2] for r in rows if r[0] == g) for g in regions], dtype=float)
    for k, band in enumerate(bands):
        values = np.array([sum(r[2] for r in rows if r[0] == g and r[1] == band) for g in regions]) / totals
        ax.barh(
            regions,
            values,
            left=left,
            label=band,
            color=PALETTE[(k + 1) % 8],
            hatch=HATCHES[k % 8],
            edgecolor="black",
            linewidth=0.4,
        )
        left += values
    ax.set_xlim(0, 1)
    ax.xaxis.set_major_formatter(
        __import__("matplotlib.ticker", fromlist=["PercentFormatter"]).PercentFormatter(1.0)
    )
    ax.set_xlabel("share of the region's customers")
    ax.set_title("Band shares by home region")
    ax.legend(ncol=len(bands), loc="upper center", bbox_to_anchor=(0.5, -0.18), frameon=False)
    return Figure(
        "band_by_region",
        "Band shares by region",
        "Each bar is one region's customers split by band, left (lowest) to right (highest); compare where the "
        "bars' segments start and end.",
        _svg(fig),
    )


def _learning_curve(con, run_id, currency) -> Figure:
    rows = con.execute(
        "select n_train, mae_mean, coalesce(mae_std, 0) from ml.learning_curve where run_id = ? order by n_train",
        [run_id],
    ).fetchall()
    if not rows:
        return Figure("learning_curve", "Learning curve", "", None, "no learning curve in this run")
    n, mae, sd = (np.array(c, dtype=float) for c in zip(*rows, strict=True))
    fig, ax = _new(6.0, 3.6)
    ax.errorbar(
        n, mae, yerr=sd, marker="o", color=PALETTE[5], capsize=3, label="held-out MAE (± sd over folds)"
    )
    ax.set_xlabel("labelled customers the model learns from")
    ax.set_ylabel(f"mean absolute error ({currency})")
    ax.set_title("Learning curve of the champion")
    ax.legend(frameon=False)
    _money(ax, "y")
    return Figure(
        "learning_curve",
        "Learning curve",
        "If the line still falls at the right, more labelled customers would help; if it is flat, they would not.",
        _svg(fig),
    )


def _coverage(con, run_id) -> Figure:
    rows = run_query(con, "report", "group_coverage", run_id=run_id).fetchall()
    level = run_query(con, "report", "interval_level", run_id=run_id).fetchall()
    if not rows:
        return Figure("coverage", "Interval coverage by band and group", "", None, "no intervals in this run")
    labels = [f"{a.replace('_', ' ')}: {g} ({c})" for a, g, _, c in rows]
    values = [r[2] for r in rows]
    fig, ax = _new(6.4, 0.28 * len(rows) + 1.4)
    ax.barh(labels, values, color=PALETTE[2], edgecolor="black", linewidth=0.4, label="held-out coverage")
    if level and level[0][0] is not None:
        ax.axvline(level[0][0], color=PALETTE[6], linestyle="--", label=f"nominal {level[0][0]:.0%}")
    ax.set_xlim(0, 1)
    ax.invert_yaxis()
    ax.xaxis.set_major_formatter(
        __import__("matplotlib.ticker", fromlist=["PercentFormatter"]).PercentFormatter(1.0)
    )
    ax.set_xlabel("share of observed salaries inside their interval")
    ax.set_title("Interval coverage by observed band and by group (customers)")
    ax.legend(frameon=False, loc="lower right")
    return Figure(
        "coverage",
        "Interval coverage by band and group",
        "Bars should reach the dashed line; a bar well short of it is a group whose intervals are too narrow.",
        _svg(fig),
    )


def _drift(con, run_id) -> Figure:
    rows = con.execute(
        "select subject, psi from ml.drift where run_id = ? order by psi desc", [run_id]
    ).fetchall()
    if not rows:
        return Figure(
            "drift",
            "Drift since the last published month",
            "",
            None,
            "no earlier published month to compare with",
        )
    fig, ax = _new(6.0, 0.3 * len(rows) + 1.4)
    ax.barh(
        [r[0] for r in rows],
        [r[1] for r in rows],
        color=PALETTE[1],
        edgecolor="black",
        linewidth=0.4,
        label="PSI",
    )
    ax.axvline(0.10, color=PALETTE[0], linestyle=":", label="warning 0.10")
    ax.axvline(0.25, color=PALETTE[6], linestyle="--", label="stop 0.25")
    ax.invert_yaxis()
    ax.set_xlabel("population stability index (unitless)")
    ax.set_title("Drift of features, label and band shares")
    ax.legend(frameon=False, loc="lower right")
    return Figure(
        "drift",
        "Drift since the last published month",
        "Longer bars moved more since last month; past the dotted line is worth a look, past the dashed line "
        "withholds the month.",
        _svg(fig),
    )


def _movers(con, run_id) -> Figure:
    rows = con.execute(
        "select from_band, to_band, sum(customer_count) from published.band_movers_history where run_id = ? "
        "group by all",
        [run_id],
    ).fetchall()
    if not rows:
        return Figure("band_movers", "Band movers", "", None, "no earlier published month to compare with")
    bands = sorted({r[0] for r in rows} | {r[1] for r in rows}, key=lambda b: (b == "none", b))
    idx = {b: i for i, b in enumerate(bands)}
    grid = np.zeros((len(bands), len(bands)), dtype=int)
    for f, t, c in rows:
        grid[idx[f], idx[t]] += c
    fig, ax = _new(5.2, 4.6)
    ax.imshow(np.log1p(grid), cmap="Oranges")
    for i in range(len(bands)):
        for j in range(len(bands)):
            if grid[i, j]:
                ax.text(j, i, str(grid[i, j]), ha="center", va="center", fontsize=7)
    ax.set_xticks(range(len(bands)), bands)
    ax.set_yticks(range(len(bands)), bands)
    ax.set_xlabel("band now")
    ax.set_ylabel("band last published month")
    ax.set_title("Band movers (customers)")
    return Figure(
        "band_movers",
        "Band movers",
        "The diagonal kept their band; cells off it moved (counts of customers, aggregates only).",
        _svg(fig),
    )
