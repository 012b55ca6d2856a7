"""Figures of a trait pair: each trait's rates in each state of the other, the
grid of joint-state rates, and the tests across trees.

Each function returns a matplotlib Figure (tests read its texts);
mkforest.report.plots.save writes it.
"""

from __future__ import annotations

import itertools
import textwrap

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
from matplotlib import colormaps  # noqa: E402
from matplotlib.colors import LogNorm  # noqa: E402
from matplotlib.lines import Line2D  # noqa: E402
from matplotlib.patches import Patch, Rectangle  # noqa: E402
from matplotlib.ticker import NullFormatter  # noqa: E402
from scipy.stats import chi2  # noqa: E402

from ..engine.models import FREE_FORBIDDEN  # noqa: E402
from . import style  # noqa: E402
from .plots import interval_panel, rate_limits  # noqa: E402
from .words import hypothesis_words  # noqa: E402

FIRST_COLOUR = style.CATEGORICAL[5]  # vermillion: the first trait's side of a test
SECOND_COLOUR = style.CATEGORICAL[0]  # blue
DOUBLE_HATCH = "xxxx"


def _split_class(label: str) -> tuple:
    """'a+b@2' -> ('a+b', '@', '2'); a label without a class -> (label, '', '')."""
    state, sep, cls = label.rpartition("@")
    return (state, sep, cls) if sep and cls.isdigit() else (label, "", "")


def _within_classes(rates: pd.DataFrame) -> pd.DataFrame:
    """With hidden rate classes the states are 'joint@class': keep the changes within a
    class (a class switch does not change the joint state), as the series
    'hypothesis, class c' on the plain joint states. Without classes: unchanged."""
    f = [_split_class(str(x)) for x in rates["from_state"]]
    t = [_split_class(str(x)) for x in rates["to_state"]]
    if not any(c for _, _, c in f):
        return rates
    keep = [a[2] == b[2] for a, b in zip(f, t)]
    out = rates[keep].copy()
    # a hypothesis without classes beside one with them keeps its name
    out["model"] = [
        f"{m}, class {a[2]}" if a[2] else m for m, a, k in zip(rates["model"], f, keep) if k
    ]
    out["from_state"] = [a[0] for a, k in zip(f, keep) if k]
    out["to_state"] = [b[0] for b, k in zip(t, keep) if k]
    return out


def _base(series: str) -> str:
    return series.split(", class ")[0]


def _hypotheses(pair, rates: pd.DataFrame, support, models=None) -> list:
    """Series of the pair in table order (hypotheses, or hypothesis x hidden class),
    without hypotheses reported ``same_as`` another."""
    names = list(dict.fromkeys(rates.loc[rates["analysis"] == pair.name, "model"]))
    repeats = style.same_as(support, pair.name)
    if models:  # the config's order, not the table's
        order = list(models)
        names.sort(key=lambda h: (order.index(_base(h)) if _base(h) in order else len(order), h))
    return [h for h in names if _base(h) not in repeats and (models is None or _base(h) in models)]


def _with_impossible(title: str, pair, rates: pd.DataFrame, support) -> str:
    """The title, and on a second line the hypotheses whose fits are impossible on some
    trees (ln L = -inf: no rates, not drawn), counted."""
    mine = rates[rates["analysis"] == pair.name]
    repeats = style.same_as(support, pair.name)
    note = style.impossible_note(
        mine, [h for h in dict.fromkeys(mine["model"]) if h not in repeats]
    )
    return f"{title}\n{note}" if note else title


def _legend_label(h, models, pair, weights) -> str:
    base = _base(h)
    kind = models[base].kind if models and base in models else base
    text = f"{h}: {hypothesis_words(base, kind, pair.first.name, pair.second.name)}"
    if base in weights and np.isfinite(weights[base]):
        text += f" (mean weight {weights[base]:.2f})"
    return text


def _weights(pair, support) -> dict:
    if support is None or not len(support) or "mean_weight" not in support:
        return {}
    s = support[support["analysis"] == pair.name]
    return dict(zip(s["model"], s["mean_weight"].astype(float)))


def _state_panels(pair) -> list:
    """[(trait, rows)]: for each trait of the pair, each of its changes in each state of
    the other (rows: ((from joint state, to joint state), label))."""
    panels = []
    for which, (trait, other) in enumerate(((pair.first, pair.second), (pair.second, pair.first))):
        rows = []
        for a, b in itertools.permutations(range(trait.k), 2):
            for c in range(other.k):
                i, j = (
                    (pair.joint(a, c), pair.joint(b, c))
                    if which == 0
                    else (pair.joint(c, a), pair.joint(c, b))
                )
                rows.append(
                    (
                        (pair.states[i], pair.states[j]),
                        f"{trait.states[a]} → {trait.states[b]}  ({other.name} {other.states[c]})",
                    )
                )
        panels.append((trait, rows))
    return panels


STATE_PANEL = 0.7  # inches of a panel outside its rows: title, axis, its label


def _state_row(m: int) -> float:
    """Inches of one row (one change in one state) holding m series."""
    return 0.06 + 0.14 * m


def _state_fixed(m: int) -> float:
    """Inches of a page outside its panels: the suptitle (two lines), the legend (its
    title of two lines and one line per series)."""
    return 0.6 + 0.17 * (m + 2)


def rates_by_state_pages(
    pair, rates: pd.DataFrame, support: pd.DataFrame | None = None, models: dict | None = None
) -> dict:
    """{page name: figure} of ``rates_by_state``: "<pair>", "<pair>.part2", ...; a
    trait's rows continue on the next page when a page (``style.FULL_HEIGHT``) is full,
    so no page grows with the states or the hypotheses."""
    r = _within_classes(rates[(rates["analysis"] == pair.name) & rates["rate"].notna()])
    m = max(len(_hypotheses(pair, r, support, models)), 1)
    row, budget = _state_row(m), style.FULL_HEIGHT - _state_fixed(m)
    pages, left = [[]], budget
    for which, (_, rows) in enumerate(_state_panels(pair)):
        start = 0
        while start < len(rows):
            fit = int((left - STATE_PANEL) // row)
            if fit < 1:
                pages.append([])
                left = budget
                continue
            end = min(len(rows), start + fit)
            pages[-1].append((which, start, end))
            left -= STATE_PANEL + (end - start) * row
            start = end
    out = {}
    for i, pieces in enumerate(pages):
        part = (i + 1, len(pages)) if len(pages) > 1 else None
        name = pair.name if i == 0 else f"{pair.name}.part{i + 1}"
        out[name] = rates_by_state(pair, rates, support, models, pieces=pieces, part=part)
    return out


def rates_by_state(
    pair,
    rates: pd.DataFrame,
    support: pd.DataFrame | None = None,
    models: dict | None = None,
    pieces: list | None = None,
    part: tuple | None = None,
):
    """For each trait of the pair, each of its changes in each state of the other
    trait: the median rate across trees and the central 95% interval across trees,
    one colour per hypothesis. Under independence a change has one rate whatever the
    other trait's state, so dependence shows as a shift between neighbouring rows.
    rates: rates.tsv (per tree, with ``at_bound``); models: {hypothesis: RateModel};
    pieces: [(trait 0 or 1, first row, end row)] of this page (default: every row;
    ``rates_by_state_pages`` cuts them into pages), part: (i, n) of a pair cut into
    pages. The rate axis is the same on every page."""
    r = _within_classes(rates[(rates["analysis"] == pair.name) & rates["rate"].notna()])
    hyps = _hypotheses(pair, r, support, models)
    colours = dict(zip(hyps, style.categorical(len(hyps))))
    markers = {h: style.MARKERS[i % len(style.MARKERS)] for i, h in enumerate(hyps)}
    stats = style.rate_intervals(r[r["model"].isin(hyps)])
    stats["series"] = stats["model"]
    stats["row"] = list(zip(stats["from_state"], stats["to_state"]))
    xlim = rate_limits(stats)
    every = _state_panels(pair)
    pieces = pieces or [(w, 0, len(rows)) for w, (_, rows) in enumerate(every)]
    panels = [(every[w][0], every[w][1][a:b], a > 0) for w, a, b in pieces]
    m = max(len(hyps), 1)
    heights = [len(rows) * _state_row(m) + STATE_PANEL for _, rows, _ in panels]
    fig, axes = plt.subplots(
        len(panels),
        1,
        figsize=(style.FULL_WIDTH, sum(heights) + _state_fixed(m)),
        layout="constrained",
        gridspec_kw={"height_ratios": heights},
        squeeze=False,
    )
    weights = _weights(pair, support)
    for ax, (trait, rows, continued) in zip(axes[:, 0], panels):
        interval_panel(ax, rows, stats, hyps, colours, markers, xlim=xlim)
        ax.set_title(
            f"changes in {trait.name}" + (" (continued)" if continued else ""),
            fontsize=style.BODY_TEXT + 1,
            loc="left",
            fontweight="bold",
        )
        ax.set_xlabel("rate (changes per unit branch length)", fontsize=style.BODY_TEXT)
    handles = [
        Line2D(
            [],
            [],
            color=colours[h],
            marker=markers[h],
            lw=1.4,
            label=_legend_label(h, models, pair, weights),
        )
        for h in hyps
    ]
    fig.legend(
        handles=handles,
        loc="outside lower center",
        ncol=1,
        fontsize=style.BODY_TEXT,
        frameon=False,
        title="hypothesis: median across trees (marker), central 95% of trees (line), "
        "as in rate_summary.tsv",
        title_fontsize=style.BODY_TEXT,
    )
    title = f"{pair.name}: rates of each trait in each state of the other, across trees"
    if part:
        title += f", page {part[0]} of {part[1]}"
    fig.suptitle(_with_impossible(title, pair, rates, support), fontsize=style.BODY_TEXT + 2)
    style.clear_end_ticks(fig)
    return fig


def _grid_cells(pair, model, stats):
    """(k x k medians, k x k texts, allowed mask, double-change mask) for one hypothesis."""
    k = len(pair.states)
    med = np.full((k, k), np.nan)
    text = np.full((k, k), "", dtype=object)
    double = np.zeros((k, k), bool)
    allowed = np.zeros((k, k), bool)
    index = {s: i for i, s in enumerate(pair.states)}
    for i in range(k):
        for j in range(k):
            (a1, a2), (b1, b2) = pair.split(i), pair.split(j)
            double[i, j] = i != j and a1 != b1 and a2 != b2
            if model is not None:
                allowed[i, j] = i != j and model.rate_index[i, j] != FREE_FORBIDDEN
    for row in stats.to_dict("records"):
        i, j = index.get(row["from_state"]), index.get(row["to_state"])
        if i is None or j is None:
            continue
        allowed[i, j] = allowed[i, j] or model is None
        med[i, j] = row["median_all"]
        text[i, j] = style.rate_text(row["median_all"])
        n_bound = row["n_lower"] + row["n_upper"]
        if n_bound:
            text[i, j] += f"\n{n_bound}/{row['n_trees']}"
    return med, text, allowed, double


GRID_CELL = 0.52  # inches a side: two lines of body text ("< 0.001", "12/100")
CHAR_WIDTH = 0.062  # inches per character of body text (DejaVu Sans at 8 pt, a margin over)


def _grid_scale(stats):
    """One colour scale for every grid of a pair (every page), from the medians drawn."""
    positive = stats["median_all"].to_numpy(float)
    positive = positive[np.isfinite(positive) & (positive > 0)]
    lo, hi = (
        (max(positive.min(), style.PRECISION / 10), positive.max()) if positive.size else (0.1, 1)
    )
    return LogNorm(vmin=lo, vmax=max(hi, lo * 10))


def _grid_geometry(pair):
    """(grid width, grid height) in inches of one hypothesis's grid with its labels."""
    k = len(pair.states)
    longest = max(len(s.replace("+", " + ")) for s in pair.states)
    labels = longest * CHAR_WIDTH + 0.35  # tick labels and the axis label beside them
    return labels + k * GRID_CELL, labels + k * GRID_CELL + 0.55  # + a three-line title


GRID_FIXED = 1.2  # inches of a grid page outside the grids: suptitle, legend


def joint_rate_pages(
    pair, rates: pd.DataFrame, support: pd.DataFrame | None = None, models: dict | None = None
) -> dict:
    """{page name: figure} of ``joint_rate_grid``: "<pair>", "<pair>.part2", ...; as many
    hypothesis grids on a page as fit within ``style.FULL_WIDTH`` x ``style.FULL_HEIGHT``
    (a grid's size grows with the joint states, a page's number with the hypotheses), all
    pages on one colour scale."""
    r = _within_classes(rates[(rates["analysis"] == pair.name) & rates["rate"].notna()])
    hyps = _hypotheses(pair, r, support, models)
    width, height = _grid_geometry(pair)
    cols = max(1, int((style.FULL_WIDTH - 1.0) // width))
    rows = max(1, int((style.FULL_HEIGHT - GRID_FIXED) // height))
    per_page = cols * rows
    groups = [hyps[i : i + per_page] for i in range(0, len(hyps), per_page)] or [[]]
    out = {}
    for i, group in enumerate(groups):
        part = (i + 1, len(groups)) if len(groups) > 1 else None
        name = pair.name if i == 0 else f"{pair.name}.part{i + 1}"
        out[name] = joint_rate_grid(pair, rates, support, models, shown=group, part=part)
    return out


def joint_rate_grid(
    pair,
    rates: pd.DataFrame,
    support: pd.DataFrame | None = None,
    models: dict | None = None,
    shown: list | None = None,
    part: tuple | None = None,
):
    """One from-state x to-state grid of joint rates per hypothesis: each allowed
    cell coloured and written with the median rate across trees of rate_summary.tsv
    (trees at the lower bound included, those the data do not bound above left out;
    both counted below the value, as "k/n"); changes of both traits at once
    cross-hatched; changes the hypothesis forbids in plain grey. shown: the hypotheses
    of this page (default all; ``joint_rate_pages`` cuts them into pages), part: (i, n)
    of a pair cut into pages. The colour scale spans every hypothesis, on every page."""
    r = _within_classes(rates[(rates["analysis"] == pair.name) & rates["rate"].notna()])
    hyps = _hypotheses(pair, r, support, models)
    # the median of rate_summary.tsv (style.rate_intervals), as in rates_by_state
    stats = style.rate_intervals(r[r["model"].isin(hyps)])
    stats["median_all"] = stats["median"]
    norm = _grid_scale(stats)
    lo = norm.vmin
    if shown is not None:
        hyps = [h for h in hyps if h in shown]
    cmap = colormaps[style.ORDERED_MAP]
    k = len(pair.states)
    n = max(len(hyps), 1)
    width, height = _grid_geometry(pair)
    cols = max(1, min(n, int((style.FULL_WIDTH - 1.0) // width)))
    rows_n = int(np.ceil(n / cols))
    fig, axes = plt.subplots(
        rows_n,
        cols,
        squeeze=False,
        layout="constrained",
        figsize=(min(cols * width + 1.0, style.FULL_WIDTH), rows_n * height + GRID_FIXED),
    )
    weights = _weights(pair, support)
    labels = [s.replace("+", " + ") for s in pair.states]
    for ax, h in zip(axes.flat, hyps):
        # with hidden classes the model's matrix is on combined states: cells from the data
        model = models.get(h) if models and h in models else None
        med, text, allowed, double = _grid_cells(pair, model, stats[stats["model"] == h])
        rgba = np.ones((k, k, 4))
        for i in range(k):
            for j in range(k):
                if allowed[i, j] and np.isfinite(med[i, j]):
                    rgba[i, j] = cmap(norm(max(med[i, j], lo)))
                elif i == j:
                    rgba[i, j] = (1, 1, 1, 1)
                else:
                    rgba[i, j] = (0.9, 0.9, 0.9, 1)
        ax.imshow(rgba, interpolation="nearest", aspect="equal")
        for i in range(k):
            for j in range(k):
                if double[i, j]:
                    ax.add_patch(
                        Rectangle(
                            (j - 0.5, i - 0.5),
                            1,
                            1,
                            fill=False,
                            hatch=DOUBLE_HATCH,
                            edgecolor="#b0b0b0",
                            lw=0,
                        )
                    )
                elif allowed[i, j] and text[i, j]:
                    ax.text(
                        j,
                        i,
                        text[i, j],
                        ha="center",
                        va="center",
                        fontsize=style.BODY_TEXT,
                        color=style.text_colour_on(rgba[i, j][:3]),
                        linespacing=1.1,
                    )
        ax.set_xticks(range(k), labels, rotation=90, fontsize=style.BODY_TEXT)
        ax.set_yticks(range(k), labels, fontsize=style.BODY_TEXT)
        ax.set_xticks(np.arange(-0.5, k), minor=True)
        ax.set_yticks(np.arange(-0.5, k), minor=True)
        ax.grid(which="minor", color="white", lw=1.0)
        ax.tick_params(which="both", length=0)
        ax.set_xlabel(f"to ({pair.first.name} + {pair.second.name})", fontsize=style.BODY_TEXT)
        ax.set_ylabel(f"from ({pair.first.name} + {pair.second.name})", fontsize=style.BODY_TEXT)
        label = _legend_label(h, models, pair, weights).split(": ", 1)
        # "(mean weight 0.43)" kept on one line (textwrap does not break at U+00A0)
        label[1] = label[1].replace("(mean weight ", "(mean\u00a0weight\u00a0")
        words = textwrap.wrap(label[1], max(20, int(k * GRID_CELL / CHAR_WIDTH)))
        ax.set_title("\n".join([label[0], *words]), fontsize=style.BODY_TEXT)
    for ax in list(axes.flat)[len(hyps) :]:
        ax.set_visible(False)
    sm = plt.cm.ScalarMappable(norm=norm, cmap=cmap)
    bar = fig.colorbar(sm, ax=axes.ravel().tolist(), shrink=0.6, pad=0.02)
    bar.set_label("median rate across trees", fontsize=style.BODY_TEXT)
    bar.ax.tick_params(labelsize=style.BODY_TEXT)
    bar.set_ticks(
        style.log_ticks(norm.vmin, norm.vmax),
        labels=[style.plain_number(v) for v in style.log_ticks(norm.vmin, norm.vmax)],
    )
    bar.ax.yaxis.set_minor_formatter(NullFormatter())
    handles = [
        Patch(
            facecolor="white",
            edgecolor="#b0b0b0",
            hatch=DOUBLE_HATCH,
            label="both traits at once: never allowed",
        ),
        Patch(facecolor="#e6e6e6", edgecolor="none", label="not allowed by this hypothesis"),
        Line2D(
            [],
            [],
            ls="none",
            label=f'values below {style.PRECISION:g} written "< {style.PRECISION:g}"; '
            "k/n under a value: k of n trees with the rate at a bound",
        ),
    ]
    fig.legend(
        handles=handles, loc="outside lower center", ncol=1, fontsize=style.BODY_TEXT, frameon=False
    )
    title = f"{pair.name}: joint-state rates, from (rows) to (columns)"
    if part:
        title += f", page {part[0]} of {part[1]}"
    fig.suptitle(_with_impossible(title, pair, rates, support), fontsize=style.BODY_TEXT + 2)
    return fig


TESTS_PER_PAGE = 3  # rows of 2.6 in: three and the title fit style.FULL_HEIGHT


def _versus(null: str, alt: str) -> str:
    """'null vs alt', on two lines when too long for half the page's width."""
    return f"{null} vs {alt}" if len(null) + len(alt) < 36 else f"{null} vs\n{alt}"


def _test_keys(pair_name: str, tests: pd.DataFrame) -> list:
    t = tests[tests["pair"] == pair_name] if len(tests) else tests
    return list(dict.fromkeys(zip(t["null"], t["alternative"]))) if len(t) else []


def pair_test_pages(pair_name: str, tests: pd.DataFrame, bootstrap: pd.DataFrame) -> dict:
    """{page name: figure} of ``pair_tests_figure``: "<pair>", "<pair>.part2", ...;
    ``TESTS_PER_PAGE`` tests on a page, so no page grows with the hypotheses."""
    keys = _test_keys(pair_name, tests)
    groups = [keys[i : i + TESTS_PER_PAGE] for i in range(0, len(keys), TESTS_PER_PAGE)] or [[]]
    out = {}
    for i, group in enumerate(groups):
        part = (i + 1, len(groups)) if len(groups) > 1 else None
        name = pair_name if i == 0 else f"{pair_name}.part{i + 1}"
        out[name] = pair_tests_figure(pair_name, tests, bootstrap, keys=group, part=part)
    return out


def pair_tests_figure(
    pair_name: str,
    tests: pd.DataFrame,
    bootstrap: pd.DataFrame,
    keys: list | None = None,
    part: tuple | None = None,
):
    """Per test (one row of panels): the LR statistic on every tree against the chi-square
    critical value; beside it, when a bootstrap ran, the bootstrap null distribution with
    the observed statistics (without one, a single column, and the title says so).
    keys: the (null, alternative) tests of this page (default all; ``pair_test_pages``
    cuts them into pages), part: (i, n) of a pair cut into pages."""
    t = tests[tests["pair"] == pair_name]
    b = bootstrap[bootstrap["pair"] == pair_name] if len(bootstrap) else bootstrap
    if keys is None:
        keys = _test_keys(pair_name, tests)
    n = max(len(keys), 1)
    cols = 2 if len(b) else 1
    fig, axes = plt.subplots(
        n,
        cols,
        figsize=(style.FULL_WIDTH, min(0.9 + 2.6 * n, style.FULL_HEIGHT)),
        squeeze=False,
        layout="constrained",
    )
    if not keys:
        for ax in axes.flat:
            ax.axis("off")
        axes[0, 0].text(
            0.5,
            0.5,
            f"{pair_name}: no nested hypotheses to test",
            ha="center",
            va="center",
            transform=axes[0, 0].transAxes,
        )
    for row, (null, alt) in enumerate(keys):
        g = t[(t["null"] == null) & (t["alternative"] == alt)]
        stat = g["statistic"].to_numpy(float)
        stat = stat[np.isfinite(stat)]
        df = int(g["df"].iloc[0])
        alpha = float(g["alpha"].iloc[0])
        crit = float(chi2.isf(alpha, df))
        ax = axes[row, 0]
        y = np.random.default_rng(0).uniform(-0.3, 0.3, stat.size)
        above = stat > crit
        ax.scatter(stat[~above], y[~above], s=14, color="#8a8a8a", alpha=0.8, label="not rejected")
        ax.scatter(stat[above], y[above], s=14, color=FIRST_COLOUR, alpha=0.9, label="rejected")
        ax.axvline(
            crit,
            color="black",
            lw=1.2,
            ls="--",
            label=f"χ² {1 - alpha:.0%} point, df {df}: {crit:.2f}",
        )
        if stat.size:
            ax.axvline(
                np.median(stat),
                color=SECOND_COLOUR,
                lw=1.2,
                label=f"median across trees: {np.median(stat):.2f}",
            )
        ax.set_ylim(-0.5, 0.5)
        ax.set_yticks([])
        ax.set_xlim(left=0, right=max(crit, stat.max() if stat.size else 0) * 1.12 + 0.5)
        ax.set_xlabel(
            "likelihood-ratio statistic 2 × (ln L alternative − ln L null)",
            fontsize=style.BODY_TEXT,
        )
        ax.tick_params(labelsize=style.BODY_TEXT)
        ax.set_title(
            f"{_versus(null, alt)}\n{int(above.sum())} of {stat.size} trees reject at {alpha:g} (χ²)",
            fontsize=style.BODY_TEXT + 1,
        )
        ax.legend(
            fontsize=style.BODY_TEXT,
            loc="upper center",
            bbox_to_anchor=(0.5, -0.3),
            ncol=1,
            frameon=False,
        )
        if cols == 1:
            continue
        ax = axes[row, 1]
        sims = b[(b["null"] == null) & (b["alternative"] == alt)] if len(b) else b
        if len(sims) == 0:
            ax.axis("off")
            ax.text(
                0.5,
                0.5,
                "no parametric bootstrap\nfor this test",
                ha="center",
                va="center",
                fontsize=style.BODY_TEXT,
                transform=ax.transAxes,
            )
            continue
        x = sims["statistic"].to_numpy(float)
        x = x[np.isfinite(x)]
        boot_trees = sorted(set(sims["tree"]))
        obs = g[g["tree"].isin(boot_trees)]["statistic"].to_numpy(float)
        hi = max(np.quantile(x, 0.995), obs.max() if obs.size else 0, crit) * 1.1 + 0.5
        heights, _, _ = ax.hist(
            x,
            bins=np.linspace(0, hi, 40),
            density=True,
            color="#cfd8d3",
            edgecolor="#7f948a",
            lw=0.5,
            label=f"simulated under {null}\n({len(x)} data sets, {len(boot_trees)} trees)",
        )
        grid = np.linspace(1e-3, hi, 300)
        ax.plot(grid, chi2.pdf(grid, df), color="black", lw=1, ls="--", label=f"χ², df {df}")
        ax.axvline(
            float(np.quantile(x, 1 - alpha)),
            color="#555555",
            lw=1,
            ls=":",
            label=f"bootstrap {1 - alpha:.0%} point",
        )
        for i, o in enumerate(obs):
            ax.axvline(
                o,
                color=FIRST_COLOUR,
                lw=1.3,
                alpha=0.8,
                label="observed (per tree)" if i == 0 else None,
            )
        ax.set_xlim(0, hi)
        ax.set_ylim(0, 1.05 * max(heights.max(), 1e-9))
        ax.set_xlabel("likelihood-ratio statistic", fontsize=style.BODY_TEXT)
        ax.set_ylabel("density", fontsize=style.BODY_TEXT)
        ax.tick_params(labelsize=style.BODY_TEXT)
        ax.set_title(f"parametric bootstrap\n{_versus(null, alt)}", fontsize=style.BODY_TEXT + 1)
        ax.legend(
            fontsize=style.BODY_TEXT,
            loc="upper center",
            bbox_to_anchor=(0.5, -0.3),
            ncol=1,
            frameon=False,
        )
    fig.suptitle(
        f"{pair_name}: likelihood-ratio tests across trees"
        + (f", page {part[0]} of {part[1]}" if part else "")
        + ("" if cols == 2 else "\n(no parametric bootstrap: set pairs.<name>.bootstrap > 0)"),
        fontsize=style.BODY_TEXT + 1,
    )
    return fig
