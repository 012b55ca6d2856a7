"""Figures of model support and rates across the tree sample (matplotlib).

Each function returns a matplotlib Figure, so tests can read its labels;
``save`` writes it in several formats.
"""

from __future__ import annotations

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
from matplotlib.collections import LineCollection  # noqa: E402
from matplotlib.lines import Line2D  # noqa: E402

from . import style  # noqa: E402

PALETTE = "cividis"
CRITERION_NAMES = {"aic": "AIC", "aicc": "AICc", "bic": "BIC"}


def _grid(n):
    cols = min(n, 3)
    rows = int(np.ceil(n / cols))
    return rows, cols


def support_weights(fits: pd.DataFrame, criterion: str = "aicc"):
    """Akaike weights across trees per model (one row each), one panel per analysis.
    Models reported ``same_as`` another have no weight and are not drawn."""
    analyses = list(dict.fromkeys(fits["analysis"]))
    d_all = fits[fits["weight"].notna()]
    counts = [max(d_all.loc[d_all["analysis"] == a, "model"].nunique(), 1) for a in analyses]
    cols = min(len(analyses), 2)
    rows = int(np.ceil(len(analyses) / cols))
    per_row = [max(counts[r * cols : (r + 1) * cols]) for r in range(rows)]
    fig, axes = plt.subplots(
        rows,
        cols,
        squeeze=False,
        layout="constrained",
        figsize=(4.6 * cols, sum(0.32 * n + 1.0 for n in per_row) + 0.5),
        gridspec_kw={"height_ratios": [n + 2.5 for n in per_row]},
    )
    name = CRITERION_NAMES.get(criterion, criterion)
    for ax, a in zip(axes.flat, analyses):
        d = d_all[d_all["analysis"] == a]
        order = list(dict.fromkeys(d["model"]))
        if order:
            style.box_and_points(ax, [d.loc[d["model"] == m, "weight"] for m in order], order)
        ax.set_xlim(-0.03, 1.03)
        ax.set_title(a, fontsize=9, loc="left", fontweight="bold")
        ax.set_ylabel("")
        ax.set_xlabel(f"{name} weight per tree", fontsize=8)
        ax.tick_params(labelsize=7.5)
        ax.tick_params(axis="y", length=0)
    for ax in list(axes.flat)[len(analyses) :]:
        ax.set_visible(False)
    fig.suptitle(f"Model support across {fits['tree'].nunique()} trees", fontsize=10)
    return fig


def support_heatmap(support: pd.DataFrame):
    """Mean Akaike weight, analysis x model (models reported ``same_as`` another: blank)."""
    table = support.pivot(index="analysis", columns="model", values="mean_weight")
    table = table.reindex(
        index=list(dict.fromkeys(support["analysis"])),
        columns=list(dict.fromkeys(support["model"])),
    )
    longest = max((len(str(c)) for c in table.columns), default=5)
    fig, ax = plt.subplots(
        figsize=(2.2 + 0.75 * table.shape[1], 1.6 + 0.45 * table.shape[0] + 0.07 * longest),
        layout="constrained",
    )
    style.annotated_grid(ax, table, PALETTE, 0.0, 1.0, "mean weight across trees")
    ax.set_title(
        "Mean model weight across trees (blank: model not fitted to that analysis or "
        "the same as another)",
        fontsize=9,
        loc="left",
        wrap=True,
    )
    ax.set_xlabel("model")
    ax.set_ylabel("analysis")
    ax.tick_params(axis="x", rotation=90, labelsize=7.5)
    ax.tick_params(axis="y", rotation=0, labelsize=7.5)
    return fig


SERIES_HEIGHT = 0.14  # inches per model in a row of an interval panel


def interval_panel(
    ax, rows: list, stats: pd.DataFrame, series: list, colours: dict, markers: dict, xlim=None
) -> None:
    """Rates on a log axis, one row per item, one sub-row per series (model or
    hypothesis): the median across trees as a marker, the central 95% interval across
    trees as a line. Trees whose rate sits at an optimiser bound are not values: they
    are counted in grey columns at the ends of the axis ("at lower bound" on the
    left, "at upper bound" on the right), at the height of the series' sub-row.

    The axis is drawn in log10 units (one axes per panel keeps large figures fast);
    its ticks are written as plain rates. rows: [(key, label)] top to bottom; stats:
    rows of style.rate_intervals with ``row`` (the key) and ``series`` columns.
    """
    m = max(len(series), 1)
    step = min(0.8 / m, 0.3)
    y_of = {}
    for i, (key, _) in enumerate(rows):
        for j, s in enumerate(series):
            y_of[(key, s)] = i + (j - (m - 1) / 2) * step
    free = stats[np.isfinite(stats["median"])]
    if xlim is None:
        values = np.concatenate([free["low"].to_numpy(float), free["high"].to_numpy(float)])
        values = values[np.isfinite(values) & (values > 0)]
        lo, hi = (values.min(), values.max()) if values.size else (0.1, 10.0)
        xlim = (lo / 2.0, hi * 2.0)
    a, b = np.log10(xlim[0]), np.log10(xlim[1])
    col = max(0.16 * (b - a), 0.35)  # width of a bound column, log10 units
    gap = 0.25 * col
    lower_x, upper_x = a - gap - col / 2, b + gap + col / 2
    for x0 in (a - gap - col, b + gap):
        ax.axvspan(x0, x0 + col, color="#f0f0f0", lw=0, zorder=0, gid=style.BACKGROUND)
    segments, points = {}, {}
    for r in stats.to_dict("records"):
        y = y_of.get((r["row"], r["series"]))
        if y is None:
            continue
        if np.isfinite(r["median"]):
            segments.setdefault(r["series"], []).append(
                [(np.log10(r["low"]), y), (np.log10(r["high"]), y)]
            )
            points.setdefault(r["series"], []).append((np.log10(r["median"]), y))
        for x, n in ((lower_x, r["n_lower"]), (upper_x, r["n_upper"])):
            if n:
                ax.text(
                    x,
                    y,
                    f"{n}/{r['n_trees']}",
                    ha="center",
                    va="center",
                    fontsize=6,
                    color=colours[r["series"]],
                    zorder=3,
                )
    for s in series:  # one collection per series: fast on large figures
        if s in segments:
            ax.add_collection(
                LineCollection(
                    segments[s], colors=colours[s], linewidths=1.4, capstyle="butt", zorder=2
                )
            )
            xy = np.asarray(points[s])
            ax.scatter(
                xy[:, 0],
                xy[:, 1],
                marker=markers[s],
                color=colours[s],
                s=20,
                edgecolors="white",
                linewidths=0.5,
                zorder=3,
            )
    for i in range(1, len(rows)):
        ax.axhline(i - 0.5, color="#dddddd", lw=0.6, zorder=0, gid=style.BACKGROUND)
    ax.set_ylim(len(rows) - 0.5, -0.5)
    ax.set_xlim(a - gap - col, b + gap + col)
    ticks = style.log_ticks(*xlim)
    ax.set_xticks(
        [lower_x, *np.log10(ticks), upper_x],
        ["at lower\nbound", *[style.plain_number(t) for t in ticks], "at upper\nbound"],
        fontsize=7,
    )
    for t in (ax.get_xticklabels()[0], ax.get_xticklabels()[-1]):
        t.set_color(style.BOUND_COLOUR)
        t.set_fontsize(6)
    for x in np.log10(ticks):
        ax.axvline(x, color="#eeeeee", lw=0.6, zorder=0, gid=style.BACKGROUND)
    ax.set_yticks(range(len(rows)), [label for _, label in rows], fontsize=7.5)
    ax.tick_params(axis="y", length=0)


def rates_across_trees(
    rates: pd.DataFrame,
    support: pd.DataFrame | None = None,
    pairs: dict | None = None,
    states: dict | None = None,
):
    """Rates across trees per change, one panel per analysis, one colour and marker per
    model (models reported ``same_as`` another are not drawn twice); median and
    central 95% interval across the trees where the rate is not at a bound, and
    the number of trees at each bound beside the axis. pairs: {pair: (first, second)}
    to name joint-state changes by the trait that changes; states: {analysis: states
    in their declared order} for the order of the rows. A model keeps its colour in
    every panel (single traits and pairs have their own sets of colours). Fits with
    ln L = -inf have no rates: their changes keep their rows, and the panel's right-hand
    title counts them (style.impossible_note)."""
    pairs = pairs or {}
    r = rates
    analyses = list(dict.fromkeys(r["analysis"]))
    repeats = {a: style.same_as(support, a) for a in analyses}
    drawn = {
        a: [m for m in dict.fromkeys(r.loc[r["analysis"] == a, "model"]) if m not in repeats[a]]
        for a in analyses
    }
    stats = style.rate_intervals(r)
    heights = []
    for a in analyses:
        n_rows = r.loc[r["analysis"] == a, ["from_state", "to_state"]].drop_duplicates()
        heights.append(len(n_rows) * (0.06 + SERIES_HEIGHT * len(drawn[a])))
    fig, axes = plt.subplots(
        len(analyses),
        1,
        squeeze=False,
        layout="constrained",
        figsize=(9.0, sum(heights) + 0.75 * len(analyses) + 0.5),
        gridspec_kw={"height_ratios": heights},
    )
    states = states or {}
    colours, markers = {}, {}
    for group in ([a for a in analyses if a not in pairs], [a for a in analyses if a in pairs]):
        names = list(dict.fromkeys(m for a in group for m in drawn[a]))
        for i, (m, c) in enumerate(zip(names, style.categorical(len(names)))):
            for a in group:
                colours[(a, m)], markers[(a, m)] = c, style.MARKERS[i % len(style.MARKERS)]
    for ax, a in zip(axes[:, 0], analyses):
        models = drawn[a]
        colour = {m: colours[(a, m)] for m in models}
        marker = {m: markers[(a, m)] for m in models}
        d = stats[(stats["analysis"] == a) & stats["model"].isin(models)].copy()
        mine = r[(r["analysis"] == a) & r["model"].isin(models)]
        keys = style.ordered_changes(
            zip(mine["from_state"], mine["to_state"]), pairs.get(a), states.get(a)
        )
        rows = [(key, style.change_label(*key, pairs.get(a))) for key in keys]
        d["row"] = list(zip(d["from_state"], d["to_state"]))
        d["series"] = d["model"]
        interval_panel(ax, rows, d, models, colour, marker)
        ax.set_title(a, fontsize=9, loc="left", fontweight="bold")
        ax.set_title(
            style.impossible_note(rates[rates["analysis"] == a], models),
            fontsize=7,
            loc="right",
            color=style.BOUND_COLOUR,
        )
        ax.set_xlabel("rate (changes per unit branch length)", fontsize=8)
        handles = [
            Line2D([], [], color=colour[m], marker=marker[m], lw=1.4, label=m) for m in models
        ]
        handles += [
            Line2D([], [], ls="none", label=f"{m} = {other}: drawn once")
            for m, other in repeats[a].items()
        ]
        ax.legend(
            handles=handles,
            loc="upper left",
            bbox_to_anchor=(1.01, 1.0),
            fontsize=7.5,
            frameon=False,
            title="model",
            title_fontsize=7.5,
            alignment="left",
            handlelength=1.8,
        )
    fig.suptitle(
        "Rates across trees: median (marker) and central 95% of trees (line); "
        "trees with the rate at a bound counted at the ends",
        fontsize=9,
    )
    return fig


save = style.save
