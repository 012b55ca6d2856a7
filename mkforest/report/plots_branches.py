"""Figure of support for branch-length treatments and tree sets across trees."""

from __future__ import annotations

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402

from ..engine.treatments import TREATMENTS, parse_label  # noqa: E402
from . import style  # noqa: E402
from .methods_branches import first_set  # noqa: E402


def _kind(label: str):
    """The registry entry of a fits.tsv ``branches`` label, None for an unknown one."""
    try:
        return parse_label(label).kind
    except ValueError:
        return None


def treatment_colour(label: str) -> str:
    """The figure colour of a fits.tsv `branches` label (the registry's; grey if unknown)."""
    kind = _kind(label)
    return kind.colour if kind else "#777777"


def treatment_weights_per_tree(fits: pd.DataFrame) -> pd.DataFrame:
    """Akaike weight summed by treatment on every tree of the first tree set."""
    f = first_set(fits)
    f = f[np.isfinite(f["weight"].astype(float))]
    return f.groupby(["analysis", "tree", "branches"], sort=False)["weight"].sum().reset_index()


def best_per_tree(fits: pd.DataFrame, criterion: str) -> pd.DataFrame:
    """ln L of the best model (smallest criterion) per tree set x analysis x tree, as the
    difference to its median on the first set."""
    f = fits.copy()
    if "tree_set" not in f:
        f["tree_set"] = ""
    f = f[np.isfinite(f[criterion].astype(float))]
    best = f.loc[f.groupby(["tree_set", "analysis", "tree"], sort=False)[criterion].idxmin()]
    first = best["tree_set"].iloc[0]
    ref = best[best["tree_set"] == first].groupby("analysis")["log_likelihood"].median()
    best = best.assign(relative=best["log_likelihood"] - best["analysis"].map(ref))
    return best


def support_branches(fits: pd.DataFrame, criterion: str = "aicc"):
    """Left: summed weight per treatment, one point per tree, bar at the mean, one row per
    analysis. Right (several tree sets): the best model's ln L per tree and set, relative to
    the median on the first set."""
    w = treatment_weights_per_tree(fits)
    analyses = list(dict.fromkeys(w["analysis"]))
    sets = list(dict.fromkeys(fits["tree_set"])) if "tree_set" in fits else [""]
    two = len(sets) > 1
    order = list(TREATMENTS)
    labels = sorted(
        dict.fromkeys(w["branches"]),
        key=lambda b: (
            order.index(_kind(b).name) if _kind(b) else len(order),
            "=" in b,
            b,
        ),
    )
    height = 0.9 + 0.32 * len(analyses) * max(len(labels), 1)
    fig, axes = plt.subplots(
        1, 2 if two else 1, figsize=(11.5 if two else 6.5, max(3.2, height)), squeeze=False
    )
    ax = axes[0, 0]
    rows = [
        (a, b)
        for a in analyses
        for b in labels
        if ((w["analysis"] == a) & (w["branches"] == b)).any()
    ]
    rng = np.random.default_rng(0)
    for y, (a, b) in enumerate(rows):
        x = w.loc[(w["analysis"] == a) & (w["branches"] == b), "weight"].to_numpy(float)
        ax.barh(y, x.mean(), color=treatment_colour(b), alpha=0.35, height=0.7)
        ax.scatter(
            x,
            y + rng.uniform(-0.25, 0.25, len(x)),
            s=7,
            color=treatment_colour(b),
            alpha=0.7,
            linewidths=0,
        )
    ax.set_yticks(range(len(rows)))
    ax.set_yticklabels([f"{a} · {b}" for a, b in rows])
    ax.invert_yaxis()
    for y in range(1, len(rows)):
        if rows[y][0] != rows[y - 1][0]:
            ax.axhline(y - 0.5, color="#bbbbbb", linewidth=0.8)
    ax.set_xlim(-0.02, 1.02)
    ax.set_xlabel("Akaike weight summed over the models of a treatment (per tree; bar = mean)")
    n = w["tree"].nunique()
    ax.set_title(
        f"Branch-length treatments across {n} trees" + (f" (tree set '{sets[0]}')" if two else "")
    )
    if two:
        ax = axes[0, 1]
        best = best_per_tree(fits, criterion)
        best = best[best["analysis"].isin(analyses)]
        # one sub-row per tree set within each trait's row, points jittered with a fixed seed
        rng = np.random.default_rng(0)
        width = 0.8 / len(sets)
        for j, (ts, colour) in enumerate(zip(sets, style.categorical(len(sets)))):
            for i, a in enumerate(analyses):
                x = best.loc[(best["analysis"] == a) & (best["tree_set"] == ts), "relative"]
                y = i - 0.4 + width * (j + 0.5) + rng.uniform(-width / 4, width / 4, len(x))
                ax.scatter(
                    x, y, s=9, color=colour, alpha=0.6, linewidths=0, label=ts if i == 0 else None
                )
        ax.set_yticks(range(len(analyses)), analyses)
        ax.set_ylim(len(analyses) - 0.5, -0.5)
        ax.axvline(0, color="#999999", linewidth=0.8, linestyle="--")
        ax.set_xlabel(f"ln L of the best model per tree − median on '{sets[0]}'")
        ax.set_ylabel("")
        ax.set_title("Tree sets: how well each trait fits")
        ax.legend(title="tree set", loc="best", fontsize=8, title_fontsize=8)
    fig.tight_layout()
    return fig
