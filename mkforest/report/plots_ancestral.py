"""Figures of ancestral states and state changes across the tree sample.

``state_tree``: the summary tree (majority-rule consensus or the user's
reference tree) drawn left to right, root at the left; at every internal node a
short stacked bar shows the mean probability of each state across the trees
that contain that clade, and the clade's frequency in the sample is written
beside it. Tips carry a square in the colour of their observed state.

``change_counts``: per analysis, the distribution across trees of the expected
number of changes in each direction (each tree's mean over its maps).

Each function returns a matplotlib Figure (tests read its labels); ``save``
writes it in several formats.
"""

from __future__ import annotations

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
import seaborn as sns  # noqa: E402
from matplotlib.lines import Line2D  # noqa: E402
from matplotlib.patches import Patch, Rectangle  # noqa: E402

from ..data.clades import ladder_children, node_clades, tips_in_drawing_order  # noqa: E402

STATE_PALETTE = "Set2"
BRANCH_COLOUR = "#4a4a4a"
SUPPORT_COLOUR = "#6b4f2a"


def state_colours(states) -> dict:
    return dict(zip(states, sns.color_palette(STATE_PALETTE, n_colors=max(len(states), 3))))


def _layout(tree):
    """x: distance from the root; y: tips 0..n-1 top to bottom, internal nodes midway."""
    x = tree.depths()
    y = np.zeros(tree.n_nodes)
    for i, v in enumerate(tips_in_drawing_order(tree)):
        y[v] = i
    kids = ladder_children(tree)
    for v in range(tree.n_tips, tree.n_nodes):
        y[v] = 0.5 * (y[kids[v][0]] + y[kids[v][-1]])
    return x, y, kids


def state_tree(tree, states: pd.DataFrame, clades: pd.DataFrame, trait=None, analysis: str = "",
               colours: dict | None = None, title: str | None = None, legend_title: str = "state"):
    """Summary tree with mean ancestral state probabilities at its nodes.

    states: ancestral_states rows of one analysis; clades: the clade table
    (members, clade, frequency); trait: the Trait, to mark tip states (optional).
    colours, title, legend_title: for other categories drawn the same way (hidden classes).
    """
    labels = list(dict.fromkeys(states["state"].astype(str)))
    colours = colours or state_colours(labels)
    x, y, kids = _layout(tree)
    span = max(float(x.max()), 1e-12)
    n = tree.n_tips
    fig_h = min(max(4.0, 0.22 * n + 1.5), 60.0)
    fig, ax = plt.subplots(figsize=(9.0, fig_h))

    for v in range(tree.n_nodes):
        if v != tree.root:
            p = tree.parent[v]
            ax.plot([x[p], x[v]], [y[v], y[v]], color=BRANCH_COLOUR, lw=1.0, zorder=1)
        if v >= tree.n_tips:
            ys = [y[c] for c in kids[v]]
            ax.plot([x[v], x[v]], [min(ys), max(ys)], color=BRANCH_COLOUR, lw=1.0, zorder=1)

    # node bars: mean probability of each state, stacked left to right
    by_members = {}
    for row in clades.to_dict("records"):
        if row["kind"] in ("consensus", "sampled", "reference", "named"):
            by_members[frozenset(str(row["members"]).split(","))] = row
    table = states.set_index(["clade", "state"])["mean_probability"]
    sets = node_clades(tree)
    bar_w, bar_h = 0.07 * span, 0.55
    n_drawn = 0
    for v in range(tree.n_tips, tree.n_nodes):
        row = by_members.get(sets[v])
        if row is None:
            continue
        probs = [float(table.get((row["clade"], s), np.nan)) for s in labels]
        left = x[v] - bar_w / 2
        if np.all(np.isfinite(probs)):
            for s, pr in zip(labels, probs):
                ax.add_patch(Rectangle((left, y[v] - bar_h / 2), bar_w * pr, bar_h,
                                       facecolor=colours[s], edgecolor="none", zorder=3))
                left += bar_w * pr
            n_drawn += 1
        ax.add_patch(Rectangle((x[v] - bar_w / 2, y[v] - bar_h / 2), bar_w, bar_h, fill=False,
                               edgecolor="black", lw=0.6, zorder=4))
        if v != tree.root and np.isfinite(row["frequency"]):
            ax.text(x[v] - bar_w / 2 - 0.01 * span, y[v] - bar_h / 2 - 0.05, f"{row['frequency']:.2f}",
                    ha="right", va="bottom", fontsize=7, color=SUPPORT_COLOUR, zorder=5)

    # tips: label and observed state
    tip_row = {t: i for i, t in enumerate(trait.taxa)} if trait is not None else {}
    for v in range(tree.n_tips):
        label = tree.tip_labels[v]
        ax.text(x[v] + 0.05 * span, y[v], label, va="center", fontsize=7)
        i = tip_row.get(label)
        if i is None:
            continue
        possible = trait.possible[i]
        if possible.all():
            continue
        if possible.sum() == 1:
            ax.add_patch(Rectangle((x[v] + 0.012 * span, y[v] - 0.3), 0.025 * span, 0.6,
                                   facecolor=colours[trait.states[int(np.flatnonzero(possible)[0])]],
                                   edgecolor="none", zorder=3))
        else:
            ax.add_patch(Rectangle((x[v] + 0.012 * span, y[v] - 0.3), 0.025 * span, 0.6,
                                   facecolor="white", edgecolor="black", lw=0.6, zorder=3))

    handles = [Patch(facecolor=colours[s], label=s) for s in labels]
    if trait is not None:
        handles.append(Patch(facecolor="white", edgecolor="black", label="tip: several states possible"))
    handles.append(Line2D([], [], ls="none", marker="$0.9$", color=SUPPORT_COLOUR, markersize=12,
                          label="clade frequency in the tree sample"))
    ax.legend(handles=handles, title=legend_title, loc="upper left", bbox_to_anchor=(1.0, 1.0),
              frameon=False, fontsize=8, title_fontsize=9)
    ax.set_ylim(n - 0.4, -0.8)
    ax.set_xlim(-0.08 * span, 1.35 * span)
    ax.set_yticks([])
    for side in ("left", "right", "top"):
        ax.spines[side].set_visible(False)
    n_trees = int(states["n_trees"].max()) if len(states) else 0
    ax.set_xlabel("distance from the root (branch length units)")
    drawn_on = (str(clades["summary_tree"].iloc[0]) if "summary_tree" in clades and len(clades)
                else "")
    default = (f"Ancestral states of '{analysis}': mean probability across trees "
               f"(up to {n_trees} tree{'' if n_trees == 1 else 's'})"
               + (f"\ndrawn on the {drawn_on}" if drawn_on else ""))
    ax.set_title(title or default, fontsize=10)
    fig.tight_layout()
    fig.mkforest_nodes_drawn = n_drawn  # for tests: how many node bars carry probabilities
    return fig


CLASS_PALETTE = "coolwarm"   # blue = slow, red = fast


def class_label(cls: int, n_classes: int) -> str:
    if cls == 1:
        return "class 1 (slowest)"
    return f"class {cls} (fastest)" if cls == n_classes else f"class {cls}"


def class_tree(tree, classes: pd.DataFrame, clades: pd.DataFrame, analysis: str, model: str):
    """Summary tree with the mean probability of each hidden rate class at its nodes
    (blue = slow, red = fast), so the clades that sit in the fast class stand out.

    classes: ancestral_classes rows of one analysis and model (the per-class rows,
    ``state`` empty, are drawn; the combined-state rows are left to the table)."""
    rows = classes[classes["state"].isna() | (classes["state"].astype(str) == "")].copy()
    n_classes = int(rows["class"].max()) if len(rows) else 1
    rows["state"] = [class_label(int(c), n_classes) for c in rows["class"]]
    labels = [class_label(c, n_classes) for c in range(1, n_classes + 1)]
    cmap = sns.color_palette(CLASS_PALETTE, as_cmap=True)   # the palette's full range: strong ends
    colours = dict(zip(labels, [cmap(x) for x in np.linspace(0.0, 1.0, n_classes)]))
    n_trees = int(rows["n_trees"].max()) if len(rows) else 0
    return state_tree(tree, rows, clades, None, analysis, colours=colours,
                      title=f"Hidden rate classes of '{analysis}' under model '{model}': mean "
                            f"probability across trees (up to {n_trees} trees)",
                      legend_title="rate class")


def change_counts(per_tree: pd.DataFrame):
    """Expected number of changes per direction across trees, one panel per analysis."""
    d = per_tree.copy()
    d["direction"] = d["from_state"].astype(str) + " → " + d["to_state"].astype(str)
    analyses = list(dict.fromkeys(d["analysis"]))
    cols = min(max(len(analyses), 1), 3)
    rows = int(np.ceil(max(len(analyses), 1) / cols))
    fig, axes = plt.subplots(rows, cols, figsize=(4.8 * cols, 3.6 * rows), squeeze=False)
    for ax, a in zip(axes.flat, analyses):
        g = d[d["analysis"] == a]
        order = list(dict.fromkeys(g["direction"]))
        sns.violinplot(data=g, x="direction", y="mean_count", order=order, ax=ax, cut=0,
                       inner="quart", density_norm="width", linewidth=0.8,
                       color=sns.color_palette(STATE_PALETTE)[1])
        ax.set_title(f"{a} ({g['tree'].nunique()} trees)")
        ax.set_xlabel("change (from → to)")
        ax.set_ylabel("changes on the tree (mean of maps)")
        ax.tick_params(axis="x", rotation=35)
    for ax in list(axes.flat)[len(analyses):]:
        ax.set_visible(False)
    fig.suptitle("Stochastic maps: number of changes by direction across trees")
    fig.tight_layout()
    return fig


# SVG element ids from a fixed salt, and no date in the files: a rerun writes the
# same bytes, so the checksums in manifest.json repeat.
matplotlib.rcParams["svg.hashsalt"] = "mkforest"


def save(fig, paths) -> None:
    for p in paths:
        svg = str(p).endswith(".svg")
        fig.savefig(p, dpi=None if svg else 150, bbox_inches="tight",
                    metadata={"Date": None} if svg else None)
    plt.close(fig)
