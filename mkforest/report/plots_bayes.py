"""Figures of the Bayesian stage: rate posteriors across trees and model probabilities.

Both read the tables (and the pooled draws) the summary job wrote, so a figure says
what its table says: the marks for the two across-tree summaries are the medians and
95% intervals of tables/posterior_summary.tsv, the per-tree lines the intervals of
tables/posterior_rates.tsv, the probabilities those of tables/marginal_likelihoods.tsv
and tables/bayes_model_support.tsv.
"""

from __future__ import annotations

import matplotlib.pyplot as plt
import numpy as np
from matplotlib.lines import Line2D
from matplotlib.patches import Patch

from . import style

GIVEN_COLOUR = style.AVERAGE_COLOUR
WEIGHTED_COLOUR = "#D55E00"  # Okabe & Ito vermillion
TREE_COLOUR = "#8c8c8c"
FLAG_COLOUR = "#CC79A7"  # Okabe & Ito reddish purple


def log_density(values, grid) -> np.ndarray:
    """Gaussian kernel density of log10(values) on a grid of log10 values, bandwidth by
    Silverman's rule (Silverman 1986, eq. 3.31: 0.9 min(sd, IQR/1.34) n^-1/5)."""
    x = np.log10(np.asarray(values, float))
    x = x[np.isfinite(x)]
    if len(x) < 2:
        return np.zeros_like(grid)
    if len(x) > 4000:  # evenly thinned: the shape, not the noise
        x = np.sort(x)[np.linspace(0, len(x) - 1, 4000).astype(int)]
    sd = np.std(x)
    iqr = np.subtract(*np.percentile(x, [75, 25]))
    h = 0.9 * max(min(sd, iqr / 1.34) if iqr > 0 else sd, 1e-3) * len(x) ** -0.2
    z = (grid[:, None] - x[None, :]) / h
    return np.exp(-0.5 * z * z).sum(axis=1) / (len(x) * h * np.sqrt(2 * np.pi))


def _wrap(text: str, width: int = 28) -> str:
    parts, line, out = text.split(", "), "", []
    for p in parts:
        if line and len(line) + len(p) + 2 > width:
            out.append(line + ",")
            line = p
        else:
            line = f"{line}, {p}" if line else p
    out.append(line)
    return "\n".join(out[:3]) + (" …" if len(out) > 3 else "")


def parameter_label(parameter: str, changes: str, pair_traits=None) -> str:
    """The change a rate belongs to ('a → b'; for a pair, the trait that changes and the
    other's state), or the parameter's label with the number of changes sharing it
    ('rate (2 changes)'); a branch-length parameter by its name."""
    listed = [c for c in changes.split(", ") if c]
    if len(listed) == 1:
        return style.change_label(*listed[0].split("->", 1), pair_traits)
    text = parameter.replace("<->", " ↔ ").replace("->", " → ")
    return f"{text} ({len(listed)} changes)" if listed else text


def posterior_rates(pooled: dict, per_tree, summary, models: list, analysis: str, pair_traits=None):
    """One panel per model, one band per parameter: the pooled density of the draws (trees
    as given), the medians and 95% intervals of both across-tree summaries, and below
    them each tree's 95% interval (flagged trees in purple).

    pooled: {(model, parameter): draws of every tree, pooled}; per_tree: posterior_rates
    rows (one per tree and parameter suffices); summary: posterior_summary rows."""
    models = [m for m in models if any(k[0] == m for k in pooled)]
    params = {m: [p for (mm, p) in pooled if mm == m] for m in models}
    heights = [max(1, len(params[m])) for m in models]
    fig, axes = plt.subplots(
        len(models),
        1,
        figsize=(8.0, 1.2 + 1.25 * sum(heights) + 0.55 * len(models)),
        gridspec_kw={"height_ratios": heights},
        sharex=True,
        squeeze=False,
    )
    every = np.concatenate([np.ravel(v) for v in pooled.values()]) if pooled else np.array([1.0])
    every = every[np.isfinite(every) & (every > 0)]
    lo, hi = np.quantile(every, [0.002, 0.998]) if len(every) else (0.01, 10.0)
    lo, hi = lo / 1.4, hi * 1.4
    grid = np.linspace(np.log10(lo), np.log10(hi), 300)
    colours = dict(zip(models, style.categorical(len(models))))
    for ax, model in zip(axes[:, 0], models):
        labels = []
        mine = per_tree[per_tree["model"] == model].drop_duplicates(["tree", "parameter"])
        summ = summary[summary["model"] == model]
        n_trees = int(summ["n_trees"].max()) if len(summ) else 0
        n_flag = int(summ["n_flagged"].max()) if len(summ) else 0
        for i, p in enumerate(params[model]):
            base = len(params[model]) - 1 - i  # first parameter on top
            dens = log_density(pooled[(model, p)], grid)
            if dens.max() > 0:
                top = base + 0.5 + 0.45 * dens / dens.max()
                ax.fill_between(10**grid, base + 0.5, top, color=colours[model], alpha=0.35, lw=0)
                ax.plot(10**grid, top, color=colours[model], lw=1)
            for kind, y, colour, marker in (
                ("trees_as_given", base + 0.45, GIVEN_COLOUR, "o"),
                ("trait_weighted", base + 0.38, WEIGHTED_COLOUR, "D"),
            ):
                row = summ[(summ["parameter"] == p) & (summ["summary"] == kind)]
                if len(row) and np.isfinite(row["median"].iloc[0]):
                    r = row.iloc[0]
                    ax.plot([r["low95"], r["high95"]], [y, y], color=colour, lw=2.2)
                    ax.plot([r["median"]], [y], marker=marker, color=colour, ms=5, mfc="white")
            trees = mine[mine["parameter"] == p].sort_values("tree")
            ys = base + 0.05 + 0.27 * (np.arange(len(trees)) + 0.5) / max(len(trees), 1)
            flagged = trees["flag"].astype(str).str.strip() != ""
            for y, (_, r), bad in zip(ys, trees.iterrows(), flagged):
                ax.plot(
                    [r["low95"], r["high95"]],
                    [y, y],
                    color=FLAG_COLOUR if bad else TREE_COLOUR,
                    lw=1.2 if bad else 0.7,
                )
            change = ""
            if "changes" in summ:
                c = summ[summ["parameter"] == p]["changes"]
                change = str(c.iloc[0]) if len(c) and str(c.iloc[0]) not in ("", "nan") else ""
            labels.append((base + 0.5, _wrap(parameter_label(p, change, pair_traits))))
        ax.set_ylim(0, len(params[model]))
        ax.set_yticks([y for y, _ in labels])
        ax.set_yticklabels([t for _, t in labels], fontsize=8)
        ax.tick_params(axis="y", length=0)
        for k in range(1, len(params[model])):
            ax.axhline(k, color="#dddddd", lw=0.6, gid=style.BACKGROUND)
        ax.set_title(
            f"{model}: {n_trees} trees" + (f", {n_flag} flagged" if n_flag else "") + "",
            fontsize=9,
            loc="left",
        )
        ax.spines[["top", "right"]].set_visible(False)
    ax = axes[-1, 0]
    ax.set_xscale("log")
    ax.set_xlim(lo, hi)
    style.plain_log_axis(ax)
    ax.set_xlabel("rate (changes per unit of branch length, as in rates.tsv)")
    handles = [
        Patch(color="#999999", alpha=0.5, label="pooled draws (trees as given)"),
        Line2D(
            [],
            [],
            color=GIVEN_COLOUR,
            lw=2,
            marker="o",
            mfc="white",
            label="median, 95%: trees as given",
        ),
        Line2D(
            [],
            [],
            color=WEIGHTED_COLOUR,
            lw=2,
            marker="D",
            mfc="white",
            label="median, 95%: weighted by the trait",
        ),
        Line2D([], [], color=TREE_COLOUR, lw=1, label="one tree's 95% interval"),
        Line2D([], [], color=FLAG_COLOUR, lw=1.2, label="flagged tree (R-hat or ESS)"),
    ]
    fig.suptitle(f"{analysis}: posterior of each rate across trees", fontsize=10, x=0.02, ha="left")
    height = fig.get_size_inches()[1]
    fig.tight_layout(rect=(0, 0.85 / height, 1, 1 - 0.3 / height))
    fig.legend(handles=handles, loc="lower center", ncol=2, fontsize=8, frameon=False)
    return fig


def model_probabilities(marginal, support, models: dict):
    """One panel per analysis: each tree's posterior probability of each model (points),
    their mean (black bar) and the trait-weighted probability (diamond)."""
    analyses = [a for a in models if a in set(marginal["analysis"])]
    ncols = min(3, max(1, len(analyses)))
    nrows = int(np.ceil(len(analyses) / ncols)) or 1
    fig, axes = plt.subplots(
        nrows, ncols, figsize=(max(5.5, 3.4 * ncols), 2.9 * nrows + 0.6), squeeze=False
    )
    for ax in axes.ravel()[len(analyses) :]:
        ax.set_visible(False)
    for ax, analysis in zip(axes.ravel(), analyses):
        names = [m for m in models[analysis] if m in set(marginal["model"])]
        mine = marginal[marginal["analysis"] == analysis]
        sup = support[support["analysis"] == analysis].set_index("model")
        colours = style.categorical(len(names))
        for x, (m, colour) in enumerate(zip(names, colours)):
            p = mine[mine["model"] == m].sort_values("tree")["posterior_probability"].to_numpy()
            p = p[np.isfinite(p)]
            jitter = (np.arange(len(p)) % 7 - 3) / 3 * 0.18
            ax.scatter(x + jitter, p, s=9, color=colour, alpha=0.6, lw=0)
            if m in sup.index:
                ax.plot(
                    [x - 0.3, x + 0.3],
                    [sup.loc[m, "mean_probability"]] * 2,
                    color=GIVEN_COLOUR,
                    lw=2,
                )
                ax.plot(
                    [x],
                    [sup.loc[m, "trait_weighted_probability"]],
                    marker="D",
                    color=WEIGHTED_COLOUR,
                    mfc="white",
                    ms=6,
                    lw=0,
                )
        n = int(sup["n_trees"].max()) if len(sup) else 0
        ax.set_xticks(range(len(names)))
        ax.set_xticklabels(names, rotation=30, ha="right", fontsize=8)
        ax.set_xlim(-0.6, len(names) - 0.4)
        ax.set_ylim(-0.04, 1.04)
        ax.set_title(f"{analysis} ({n} trees)", fontsize=9, loc="left")
        ax.set_ylabel("posterior probability", fontsize=8)
        ax.tick_params(axis="y", labelsize=8)
        ax.spines[["top", "right"]].set_visible(False)
        ax.grid(axis="y", color="#e6e6e6", lw=0.6, gid=style.BACKGROUND)
        ax.set_axisbelow(True)
    handles = [
        Line2D([], [], color="#777777", marker="o", lw=0, ms=4, label="one tree"),
        Line2D([], [], color=GIVEN_COLOUR, lw=2, label="mean over trees"),
        Line2D(
            [],
            [],
            color=WEIGHTED_COLOUR,
            marker="D",
            mfc="white",
            lw=0,
            label="trees weighted by the trait",
        ),
    ]
    fig.suptitle(
        "Posterior model probabilities across trees (equal prior on models)",
        fontsize=10,
        x=0.02,
        ha="left",
    )
    fig.tight_layout(rect=(0, 0.08, 1, 0.95))
    fig.legend(handles=handles, loc="lower center", ncol=3, fontsize=8, frameon=False)
    return fig
