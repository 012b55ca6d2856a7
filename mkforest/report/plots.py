"""Figures of model support and rates across the tree sample (matplotlib).

Each function returns a matplotlib Figure, so tests can read its labels;
``save`` writes it in several formats.
"""

from __future__ import annotations

import textwrap

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
from matplotlib.collections import LineCollection  # noqa: E402
from matplotlib.lines import Line2D  # noqa: E402

from ..engine.summarise import as_text  # noqa: E402
from ..engine.treatments import parse_label  # noqa: E402
from . import style  # noqa: E402

PALETTE = "cividis"
CRITERION_NAMES = {"aic": "AIC", "aicc": "AICc", "bic": "BIC"}


def _grid(n):
    cols = min(n, 3)
    rows = int(np.ceil(n / cols))
    return rows, cols


def support_weights(fits: pd.DataFrame, criterion: str = "aicc", tree_set: str = ""):
    """Akaike weights across trees per model (one row each), one panel per analysis.
    Models reported ``same_as`` another have no weight and are not drawn. tree_set: the
    set the trees come from, named in the title (with several sets)."""
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
        figsize=(style.FULL_WIDTH, sum(0.32 * n + 1.0 for n in per_row) + 0.5),
        gridspec_kw={"height_ratios": [n + 2.5 for n in per_row]},
    )
    name = CRITERION_NAMES.get(criterion, criterion)
    for ax, a in zip(axes.flat, analyses):
        d = d_all[d_all["analysis"] == a]
        order = list(dict.fromkeys(d["model"]))
        if order:
            style.box_and_points(ax, [d.loc[d["model"] == m, "weight"] for m in order], order)
        ax.set_xlim(-0.03, 1.03)
        ax.set_title(a, fontsize=style.BODY_TEXT + 1, loc="left", fontweight="bold")
        ax.set_ylabel("")
        ax.set_xlabel(f"{name} weight per tree", fontsize=style.BODY_TEXT)
        ax.tick_params(labelsize=style.BODY_TEXT)
        ax.tick_params(axis="y", length=0)
    for ax in list(axes.flat)[len(analyses) :]:
        ax.set_visible(False)
    where = f" of tree set '{tree_set}'" if tree_set else ""
    fig.suptitle(
        f"Model support across {fits['tree'].nunique()} trees{where}",
        fontsize=style.BODY_TEXT + 2,
    )
    return fig


def support_heatmap(support: pd.DataFrame):
    """Mean Akaike weight, analysis x model (models reported ``same_as`` another: blank);
    with several tree sets, one row per set and analysis ("set · analysis"): every set's
    support in one grid."""
    sets = list(dict.fromkeys(support["tree_set"])) if "tree_set" in support else []
    many = len(sets) > 1
    rows = (
        [f"{t} · {a}" for t, a in zip(support["tree_set"], support["analysis"])]
        if many
        else list(support["analysis"])
    )
    s = support.assign(row=rows)
    table = s.pivot(index="row", columns="model", values="mean_weight")
    table = table.reindex(
        index=list(dict.fromkeys(s["row"])), columns=list(dict.fromkeys(s["model"]))
    )
    longest = max((len(str(c)) for c in table.columns), default=5)
    width = min(style.FULL_WIDTH, 3.4 + 0.8 * table.shape[1])
    fig, ax = plt.subplots(
        figsize=(width, min(style.FULL_HEIGHT, 2.0 + 0.4 * table.shape[0] + 0.08 * longest)),
        layout="constrained",
    )
    style.annotated_grid(
        ax, table, PALETTE, 0.0, 1.0, "mean weight across trees", fontsize=style.BODY_TEXT
    )
    ax.set_title(
        "Mean model weight across trees"
        + (f" in each tree set ({', '.join(sets)})" if many else "")
        + "\n(blank: model not fitted to that analysis or the same as another)",
        fontsize=style.BODY_TEXT + 1,
        loc="left",
    )
    ax.set_xlabel("model", fontsize=style.BODY_TEXT)
    ax.set_ylabel("tree set · analysis" if many else "analysis", fontsize=style.BODY_TEXT)
    ax.tick_params(axis="x", rotation=90, labelsize=style.BODY_TEXT)
    ax.tick_params(axis="y", rotation=0, labelsize=style.BODY_TEXT)
    bar = fig.axes[-1]
    bar.tick_params(labelsize=style.BODY_TEXT)
    bar.yaxis.label.set_fontsize(style.BODY_TEXT)
    return fig


SERIES_HEIGHT = 0.14  # inches per model in a row of an interval panel


def rate_limits(stats: pd.DataFrame) -> tuple:
    """(low, high) of a rate axis: the interval ends and medians that are values (neither
    at the lower bound nor missing), with a factor 2 of room."""
    parts = []
    for col in ("low", "median", "high"):
        v = stats[col].to_numpy(float)
        bound = stats["lower_value"].to_numpy(float) if "lower_value" in stats else np.nan
        parts.append(v[np.isfinite(v) & (v > 0) & ~(v <= bound * (1 + 1e-9))])
    values = np.concatenate(parts)
    lo, hi = (values.min(), values.max()) if values.size else (0.1, 10.0)
    return (lo / 2.0, hi * 2.0) if hi > lo else (lo / 4.0, lo * 4.0)


def interval_panel(
    ax, rows: list, stats: pd.DataFrame, series: list, colours: dict, markers: dict, xlim=None
) -> None:
    """Rates on a log axis, one row per item, one sub-row per series (model or
    hypothesis): the median across trees as a marker, the central 95% interval across
    trees as a line, both those of rate_summary.tsv (``style.rate_intervals``). Trees
    whose rate the data do not bound from above are not values: they are counted in the
    grey column at the right end ("no upper bound"). Trees at the lower bound are
    estimates of about zero: counted in the grey column at the left end, and part of the
    median and interval, whose ends at the bound are drawn at that column's edge; where
    the median is the bound (most trees sit there) the marker sits at the column's edge
    and the count is bold: the headline is the bound, with its count.

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
    if xlim is None:
        xlim = rate_limits(stats)
    a, b = np.log10(xlim[0]), np.log10(xlim[1])
    col = max(0.25 * (b - a), 0.5)  # width of a bound column, log10 units
    gap = 0.4 * col
    lower_x, upper_x = a - gap - col / 2, b + gap + col / 2
    edge_x = a - gap / 2  # a median or interval end at the lower bound
    for x0 in (a - gap - col, b + gap):
        ax.axvspan(x0, x0 + col, color="#f0f0f0", lw=0, zorder=0, gid=style.BACKGROUND)
    segments, points = {}, {}
    for r in stats.to_dict("records"):
        y = y_of.get((r["row"], r["series"]))
        if y is None:
            continue
        bound = r.get("lower_value", np.nan)

        def x_of(v, bound=bound):
            return edge_x if np.isfinite(bound) and v <= bound * (1 + 1e-9) else np.log10(v)

        if np.isfinite(r["median"]):
            segments.setdefault(r["series"], []).append([(x_of(r["low"]), y), (x_of(r["high"]), y)])
            points.setdefault(r["series"], []).append((x_of(r["median"]), y))
        for x, n, headline in (
            (lower_x, r["n_lower"], bool(r.get("median_at_lower", False))),
            (upper_x, r["n_upper"], False),
        ):
            if n:
                ax.text(
                    x,
                    y,
                    f"{n}/{r['n_trees']}",
                    ha="center",
                    va="center",
                    fontsize=style.BODY_TEXT,
                    fontweight="bold" if headline else "normal",
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
        ["at lower\nbound", *[style.plain_number(t) for t in ticks], "no upper\nbound"],
        fontsize=style.BODY_TEXT,
    )
    for t in (ax.get_xticklabels()[0], ax.get_xticklabels()[-1]):
        t.set_color(style.BOUND_COLOUR)
    for x in np.log10(ticks):
        ax.axvline(x, color="#eeeeee", lw=0.6, zorder=0, gid=style.BACKGROUND)
    ax.set_yticks(range(len(rows)), [label for _, label in rows], fontsize=style.BODY_TEXT)
    ax.tick_params(axis="y", length=0)


# The unit of a rate is set by the branch lengths it multiplies: rates under different
# treatments are in different units and never share an axis.
def rate_unit(branches) -> str:
    """The axis label of rates under a branch-length treatment (fits.tsv ``branches``)."""
    t = parse_label(branches)
    if t.name == "as_given":
        return "rate (changes per unit branch length, as given)"
    if t.name == "unit":
        return "rate (changes per branch: every branch of length 1)"
    what = f"{t.name} {t.fixed:g}" if t.fixed is not None else f"{t.name} estimated per tree"
    return f"rate (changes per unit of branch length transformed by {what})"


def treatment_of(support: pd.DataFrame | None, analysis: str) -> dict:
    """{model: its branch-length treatment} of an analysis (model_support's ``branches``)."""
    if support is None or "branches" not in support:
        return {}
    s = support[support["analysis"] == analysis]
    return dict(zip(s["model"], as_text(s["branches"])))


def rates_across_trees(
    rates: pd.DataFrame,
    support: pd.DataFrame | None = None,
    pairs: dict | None = None,
    states: dict | None = None,
    tree_set: str = "",
    part: tuple | None = None,
):
    """Rates across trees per change, one panel per analysis and branch-length treatment
    (rates under different treatments are in different units: each panel's axis names
    its own), one colour and marker per model (models reported ``same_as`` another are
    not drawn twice); median and central 95% interval across trees as in rate_summary.tsv
    (``style.rate_intervals``), with the trees at each bound counted beside the axis.
    pairs: {pair: (first, second)} to name joint-state changes by the trait that changes;
    states: {analysis: states in their declared order} for the order of the rows;
    tree_set: named in the title; part: (i, n) of an analysis cut into pages. A model keeps its colour in every panel (single traits
    and pairs have their own sets of colours). Fits with ln L = -inf have no rates: their
    changes keep their rows, and the panel's right-hand title counts them
    (style.impossible_note). The workflow draws one analysis per figure (``rate_pages``),
    so a figure's height follows one analysis, not the run."""
    pairs = pairs or {}
    r = rates
    analyses = list(dict.fromkeys(r["analysis"]))
    repeats = {a: style.same_as(support, a) for a in analyses}
    drawn = {
        a: [m for m in dict.fromkeys(r.loc[r["analysis"] == a, "model"]) if m not in repeats[a]]
        for a in analyses
    }
    panels = []  # (analysis, unit, models)
    for a in analyses:
        units = treatment_of(support, a)
        groups = {}
        for m in drawn[a]:
            groups.setdefault(rate_unit(units.get(m)), []).append(m)
        panels += [(a, unit, models) for unit, models in groups.items()]
    stats = style.rate_intervals(r)
    heights = []
    for a, _, models in panels:
        n_rows = r.loc[r["analysis"] == a, ["from_state", "to_state"]].drop_duplicates()
        heights.append(len(n_rows) * (0.06 + SERIES_HEIGHT * len(models)) + 0.3)
    fig, axes = plt.subplots(
        len(panels),
        1,
        squeeze=False,
        layout="constrained",
        figsize=(style.FULL_WIDTH, sum(heights) + 0.75 * len(panels) + 0.6),
        gridspec_kw={"height_ratios": heights},
    )
    states = states or {}
    colours, markers = {}, {}
    for group in ([a for a in analyses if a not in pairs], [a for a in analyses if a in pairs]):
        names = list(dict.fromkeys(m for a in group for m in drawn[a]))
        for i, (m, c) in enumerate(zip(names, style.categorical(len(names)))):
            for a in group:
                colours[(a, m)], markers[(a, m)] = c, style.MARKERS[i % len(style.MARKERS)]
    for ax, (a, unit, models) in zip(axes[:, 0], panels):
        colour = {m: colours[(a, m)] for m in models}
        marker = {m: markers[(a, m)] for m in models}
        d = stats[(stats["analysis"] == a) & stats["model"].isin(models)].copy()
        mine = r[(r["analysis"] == a) & r["model"].isin(drawn[a])]
        keys = style.ordered_changes(
            zip(mine["from_state"], mine["to_state"]), pairs.get(a), states.get(a)
        )
        rows = [(key, style.change_label(*key, pairs.get(a))) for key in keys]
        d["row"] = list(zip(d["from_state"], d["to_state"]))
        d["series"] = d["model"]
        interval_panel(ax, rows, d, models, colour, marker)
        ax.set_title(
            a + (f" (changes, part {part[0]} of {part[1]})" if part else ""),
            fontsize=style.BODY_TEXT + 1,
            loc="left",
            fontweight="bold",
        )
        ax.set_title(  # wrapped to the right half, clear of the analysis's name
            textwrap.fill(style.impossible_note(rates[rates["analysis"] == a], models), 64),
            fontsize=style.BODY_TEXT,
            loc="right",
            color=style.BOUND_COLOUR,
        )
        ax.set_xlabel(unit, fontsize=style.BODY_TEXT)
        handles = [
            Line2D([], [], color=colour[m], marker=marker[m], lw=1.4, label=m) for m in models
        ]
        handles += [
            Line2D([], [], ls="none", label=f"{m} = {other}: drawn once")
            for m, other in repeats[a].items()
            if other in models
        ]
        ax.legend(
            handles=handles,
            loc="upper left",
            bbox_to_anchor=(1.01, 1.0),
            fontsize=style.BODY_TEXT,
            frameon=False,
            title="model",
            title_fontsize=style.BODY_TEXT,
            alignment="left",
            handlelength=1.8,
        )
    n_trees = r.drop_duplicates([k for k in ("tree_set", "tree") if k in r]).shape[0]
    where = f"tree set '{tree_set}', " if tree_set else ""
    fig.suptitle(
        f"Rates across trees ({where}{n_trees} trees): median (marker) and central 95% "
        "of trees (line), as in rate_summary.tsv;\ntrees at the lower bound counted on the "
        "left (bold: the median is the bound),\ntrees the data do not bound above counted "
        "on the right",
        fontsize=style.BODY_TEXT,
    )
    style.clear_end_ticks(fig)
    return fig


def rate_pages(rates, support=None, pairs=None, states=None, tree_set: str = "") -> dict:
    """{page name: figure}: one figure per analysis ("<analysis>"), so a figure's size
    never grows with the number of traits; an analysis too tall for a page (many joint
    states) is cut into parts by its changes, in reading order ("<analysis>.part2", ...),
    each within the page."""
    out = {}
    pairs = pairs or {}
    for a in dict.fromkeys(rates["analysis"]):
        mine = rates[rates["analysis"] == a]
        fig = rates_across_trees(mine, support, pairs, states, tree_set)
        height = fig.get_size_inches()[1]
        if height <= style.FULL_HEIGHT:
            out[a] = fig
            continue
        plt.close(fig)
        keys = style.ordered_changes(
            zip(mine["from_state"], mine["to_state"]), pairs.get(a), (states or {}).get(a)
        )
        n = int(np.ceil(height / (style.FULL_HEIGHT - 1.0)))
        size = int(np.ceil(len(keys) / n))
        change = pd.Series(list(zip(mine["from_state"], mine["to_state"])), index=mine.index)
        for i in range(n):
            part = set(keys[i * size : (i + 1) * size])
            if not part:
                continue
            fig = rates_across_trees(
                mine[change.isin(part)], support, pairs, states, tree_set, part=(i + 1, n)
            )
            out[a if i == 0 else f"{a}.part{i + 1}"] = fig
    return out


save = style.save
