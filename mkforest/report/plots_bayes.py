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


BAND = 0.85  # inches of one rate's band: its density, the two summaries, the trees
RATE_PANEL = 0.55  # inches of a model's panel outside its bands: its title
RATE_FIXED = 1.3  # inches of a page outside its panels: title, rate axis, legend


def _parameters(pooled: dict, models: list) -> dict:
    models = [m for m in models if any(k[0] == m for k in pooled)]
    return {m: [p for (mm, p) in pooled if mm == m] for m in models}


def posterior_rate_pages(
    pooled: dict, per_tree, summary, models: list, analysis: str, pair_traits=None
) -> dict:
    """{page name: figure} of ``posterior_rates``: "<analysis>", "<analysis>.part2", ...;
    a model's rates continue on the next page when a page (``style.FULL_HEIGHT``) is
    full, so no page grows with the rates or the models. One rate axis on every page."""
    params = _parameters(pooled, models)
    budget = style.FULL_HEIGHT - RATE_FIXED
    pages, left = [[]], budget
    for model, names in params.items():
        start = 0
        while start < len(names):
            fit = int((left - RATE_PANEL) // BAND)
            if fit < 1:
                pages.append([])
                left = budget
                continue
            end = min(len(names), start + fit)
            pages[-1].append((model, start, end))
            left -= RATE_PANEL + (end - start) * BAND
            start = end
    out = {}
    for i, pieces in enumerate(pages):
        part = (i + 1, len(pages)) if len(pages) > 1 else None
        out[analysis if i == 0 else f"{analysis}.part{i + 1}"] = posterior_rates(
            pooled, per_tree, summary, models, analysis, pair_traits, pieces=pieces, part=part
        )
    return out


def posterior_rates(
    pooled: dict,
    per_tree,
    summary,
    models: list,
    analysis: str,
    pair_traits=None,
    pieces: list | None = None,
    part: tuple | None = None,
):
    """One panel per model, one band per parameter: the pooled density of the draws (trees
    as given), the medians and 95% intervals of both across-tree summaries, and below
    them each tree's 95% interval (flagged trees in purple).

    pooled: {(model, parameter): draws of every tree, pooled}; per_tree: posterior_rates
    rows (one per tree and parameter suffices); summary: posterior_summary rows;
    pieces: [(model, first parameter, end parameter)] of this page (default: every
    parameter; ``posterior_rate_pages`` cuts them into pages), part: (i, n) of an
    analysis cut into pages."""
    every_param = _parameters(pooled, models)
    pieces = pieces or [(m, 0, len(p)) for m, p in every_param.items()]
    panels = [(m, every_param[m][a:b], a > 0) for m, a, b in pieces]
    colours = dict(zip(every_param, style.categorical(len(every_param))))
    if not panels:  # no draws saved for this analysis: say so rather than fail
        fig, ax = plt.subplots(figsize=(style.FULL_WIDTH, 2.0))
        ax.axis("off")
        ax.text(0.5, 0.5, f"{analysis}: no posterior draws saved", ha="center", va="center")
        return fig
    heights = [max(1, len(names)) for _, names, _ in panels]
    fig, axes = plt.subplots(
        len(panels),
        1,
        figsize=(style.FULL_WIDTH, RATE_FIXED + BAND * sum(heights) + RATE_PANEL * len(panels)),
        gridspec_kw={"height_ratios": heights},
        sharex=True,
        squeeze=False,
    )
    every = np.concatenate([np.ravel(v) for v in pooled.values()]) if pooled else np.array([1.0])
    every = every[np.isfinite(every) & (every > 0)]
    lo, hi = np.quantile(every, [0.002, 0.998]) if len(every) else (0.01, 10.0)
    lo, hi = lo / 1.4, hi * 1.4
    grid = np.linspace(np.log10(lo), np.log10(hi), 300)
    for ax, (model, names, continued) in zip(axes[:, 0], panels):
        labels = []
        mine = per_tree[per_tree["model"] == model].drop_duplicates(["tree", "parameter"])
        summ = summary[summary["model"] == model]
        n_trees = int(summ["n_trees"].max()) if len(summ) else 0
        n_flag = int(summ["n_flagged"].max()) if len(summ) else 0
        for i, p in enumerate(names):
            base = len(names) - 1 - i  # first parameter on top
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
        ax.set_ylim(0, len(names))
        ax.set_yticks([y for y, _ in labels])
        ax.set_yticklabels([t for _, t in labels], fontsize=8)
        ax.tick_params(axis="y", length=0)
        for k in range(1, len(names)):
            ax.axhline(k, color="#dddddd", lw=0.6, gid=style.BACKGROUND)
        ax.set_title(
            f"{model}: {n_trees} trees"
            + (f", {n_flag} flagged" if n_flag else "")
            + (" (continued)" if continued else ""),
            fontsize=style.BODY_TEXT + 1,
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
    title = f"{analysis}: posterior of each rate across trees"
    if part:
        title += f", page {part[0]} of {part[1]}"
    fig.suptitle(title, fontsize=style.BODY_TEXT + 2, x=0.02, ha="left")
    height = fig.get_size_inches()[1]
    fig.tight_layout(rect=(0, 0.85 / height, 1, 1 - 0.3 / height))
    fig.legend(handles=handles, loc="lower center", ncol=2, fontsize=style.BODY_TEXT, frameon=False)
    return fig


PROBABILITY_COLUMNS, PROBABILITY_ROWS = 2, 2  # panels of 3.4 x 3.8 in: a page's worth


def model_probability_pages(marginal, support, models: dict) -> dict:
    """{page name: figure} of ``model_probabilities``: "model_probabilities",
    "model_probabilities.part2", ...; four analyses on a page, in the config's order,
    so no page grows with the number of analyses."""
    analyses = [a for a in models if a in set(marginal["analysis"])]
    size = PROBABILITY_COLUMNS * PROBABILITY_ROWS
    groups = [analyses[i : i + size] for i in range(0, len(analyses), size)] or [[]]
    out = {}
    for i, group in enumerate(groups):
        part = (i + 1, len(groups)) if len(groups) > 1 else None
        name = "model_probabilities" if i == 0 else f"model_probabilities.part{i + 1}"
        out[name] = model_probabilities(marginal, support, {a: models[a] for a in group}, part)
    return out


def model_probabilities(marginal, support, models: dict, part: tuple | None = None):
    """One panel per analysis: each tree's posterior probability of each model (points),
    their mean (black bar) and the trait-weighted probability (diamond). part: (i, n) of
    analyses cut into pages (``model_probability_pages``)."""
    analyses = [a for a in models if a in set(marginal["analysis"])]
    ncols = min(PROBABILITY_COLUMNS, max(1, len(analyses)))
    nrows = int(np.ceil(len(analyses) / ncols)) or 1
    fig, axes = plt.subplots(
        nrows, ncols, figsize=(max(5.5, 3.4 * ncols), 3.8 * nrows + 0.8), squeeze=False
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
        ax.set_xticklabels(names, rotation=90, fontsize=style.BODY_TEXT)
        ax.set_xlim(-0.6, len(names) - 0.4)
        ax.set_ylim(-0.04, 1.04)
        ax.set_title(f"{analysis} ({n} trees)", fontsize=style.BODY_TEXT + 1, loc="left")
        ax.set_ylabel("posterior probability", fontsize=style.BODY_TEXT)
        ax.tick_params(axis="y", labelsize=style.BODY_TEXT)
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
        "Posterior model probabilities across trees (equal prior on models)"
        + (f", page {part[0]} of {part[1]}" if part else ""),
        fontsize=style.BODY_TEXT + 2,
        x=0.02,
        ha="left",
    )
    fig.tight_layout(rect=(0, 0.08, 1, 0.95))
    fig.legend(handles=handles, loc="lower center", ncol=3, fontsize=style.BODY_TEXT, frameon=False)
    return fig
