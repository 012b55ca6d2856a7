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
    """Top: summed weight per treatment, one point per tree, bar at the mean, one row per
    analysis and treatment, for the analyses whose models use more than one treatment (an
    analysis with one treatment has weight 1 on every tree: it is left out, and the title
    says so). Bottom (several tree sets): the best model's ln L per tree and set, relative
    to the median on the first set. Panels are stacked to keep the figure within a page."""
    w = treatment_weights_per_tree(fits)
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
    every = list(dict.fromkeys(w["analysis"]))
    analyses = [a for a in every if w.loc[w["analysis"] == a, "branches"].nunique() > 1]
    single = [a for a in every if a not in analyses]
    rows = [
        (a, b)
        for a in analyses
        for b in labels
        if ((w["analysis"] == a) & (w["branches"] == b)).any()
    ]
    heights = ([0.8 + 0.3 * len(rows)] if rows else []) + ([0.8 + 0.45 * len(every)] if two else [])
    heights = heights or [1.0]  # nothing to compare: one empty panel says so
    fig, axes = plt.subplots(
        len(heights),
        1,
        figsize=(style.FULL_WIDTH, min(sum(heights) + 0.8, style.FULL_HEIGHT)),
        squeeze=False,
        layout="constrained",
        gridspec_kw={"height_ratios": heights},
    )
    axes = list(axes[:, 0])
    n = w["tree"].nunique()
    left_out = (
        f"{', '.join(single)}: one treatment only (weight 1 on every tree), not drawn"
        if single
        else ""
    )
    if rows:
        ax = axes.pop(0)
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
        ax.set_yticklabels([f"{a} · {b}" for a, b in rows], fontsize=style.BODY_TEXT)
        ax.invert_yaxis()
        for y in range(1, len(rows)):
            if rows[y][0] != rows[y - 1][0]:
                ax.axhline(y - 0.5, color="#bbbbbb", linewidth=0.8, gid=style.BACKGROUND)
        ax.set_xlim(-0.02, 1.02)
        ax.set_xlabel(
            "Akaike weight summed over the models of a treatment (per tree; bar = mean)",
            fontsize=style.BODY_TEXT,
        )
        ax.tick_params(labelsize=style.BODY_TEXT)
        ax.set_title(
            f"Branch-length treatments across {n} trees"
            + (f" of tree set '{sets[0]}'" if two else "")
            + (f"\n({left_out})" if left_out else ""),
            fontsize=style.BODY_TEXT + 1,
            loc="left",
        )
    if two:
        ax = axes.pop(0)
        best = best_per_tree(fits, criterion)
        # one sub-row per tree set within each trait's row, points jittered with a fixed seed
        rng = np.random.default_rng(0)
        width = 0.8 / len(sets)
        for j, (ts, colour) in enumerate(zip(sets, style.categorical(len(sets)))):
            for i, a in enumerate(every):
                x = best.loc[(best["analysis"] == a) & (best["tree_set"] == ts), "relative"]
                y = i - 0.4 + width * (j + 0.5) + rng.uniform(-width / 4, width / 4, len(x))
                ax.scatter(
                    x, y, s=9, color=colour, alpha=0.6, linewidths=0, label=ts if i == 0 else None
                )
        ax.set_yticks(range(len(every)), every, fontsize=style.BODY_TEXT)
        ax.set_ylim(len(every) - 0.5, -0.5)
        ax.axvline(0, color="#999999", linewidth=0.8, linestyle="--", gid=style.BACKGROUND)
        ax.set_xlabel(
            f"ln L of the best model per tree − median on '{sets[0]}'", fontsize=style.BODY_TEXT
        )
        ax.tick_params(labelsize=style.BODY_TEXT)
        ax.set_ylabel("")
        ax.set_title(
            "Tree sets: how well each trait fits"
            + (f"\n({left_out})" if left_out and not rows else ""),
            fontsize=style.BODY_TEXT + 1,
            loc="left",
        )
        ax.legend(
            title="tree set",
            loc="upper left",
            bbox_to_anchor=(1.01, 1.0),
            frameon=False,
            fontsize=style.BODY_TEXT,
            title_fontsize=style.BODY_TEXT,
        )
    for ax in axes:  # nothing to compare (never drawn so by the workflow)
        ax.set_axis_off()
        ax.set_title(left_out or "one treatment and one tree set: nothing to compare", loc="left")
    return fig
