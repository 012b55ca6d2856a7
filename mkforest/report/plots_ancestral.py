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

from dataclasses import dataclass

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
from matplotlib import colormaps  # noqa: E402
from matplotlib.collections import LineCollection  # noqa: E402
from matplotlib.legend_handler import HandlerTuple  # noqa: E402
from matplotlib.lines import Line2D  # noqa: E402
from matplotlib.patches import Patch, Rectangle  # noqa: E402
from matplotlib.ticker import MaxNLocator  # noqa: E402

from ..data.clades import ladder_children, node_clades, tips_in_drawing_order  # noqa: E402
from . import style  # noqa: E402
from .words import is_stepwise  # noqa: E402

BRANCH_COLOUR = "#4a4a4a"
SUPPORT_COLOUR = "#6b4f2a"
UNKNOWN_HATCH = "////"

# Sizes in inches: the tree is laid out on a known canvas so that bars and labels
# can be placed where they collide with nothing already drawn.
ROW = 0.2  # height of one tip row: a tree of many tips is cut into pages (state_tree_pages)
BAR_W, BAR_H = 0.34, 0.11
TIP_W = 0.11
FONT_TIP = FONT_FREQ = style.BODY_TEXT
TOP = 0.95  # inches above the tips: the title (up to four lines, a fifth naming the tree set)
AXIS_H = 0.55  # inches below the tips: the distance axis and its label
LEGEND_LINE = 0.19  # inches per line of the legend (8-point text and its spacing)
# rows of a page beyond its tips, each side: a node midway between two pages is drawn whole
# on both, the next page's tips stay out
EDGE = 0.4
# tips within this share of the tree height of the farthest count as ending together: a
# time tree (a summary tree of averaged lengths is ultrametric only to rounding)
TIME_TREE_TOL = 1e-3


def state_colours(states, is_ordered: bool = False) -> dict:
    """Categorical (Okabe & Ito) colours, an ordered ramp for ordered traits, and for
    joint states 'a+b' of a pair the first state's hue in the second state's shade."""
    states = list(states)
    if states and all("+" in s for s in states):
        firsts = list(dict.fromkeys(s.split("+", 1)[0] for s in states))
        seconds = list(dict.fromkeys(s.split("+", 1)[1] for s in states))
        if len(firsts) * len(seconds) == len(states):
            return style.joint_colours(firsts, seconds)
    return style.state_colours(states, is_ordered)


def is_ordered_trait(models, k: int) -> bool:
    """True when some model of the trait lets it change only one step at a time along
    its declared state order (a stepwise model): then the states have an order worth
    a sequential palette."""
    return k >= 3 and any(is_stepwise(m) for m in models)


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


class _Occupied:
    """Boxes (x0, y0, x1, y1, in inches) already taken on the canvas."""

    def __init__(self):
        self.boxes = np.empty((0, 4))

    def add(self, boxes):
        self.boxes = np.vstack([self.boxes, np.asarray(boxes, float).reshape(-1, 4)])

    def free(self, box, pad=0.01) -> bool:
        b = self.boxes
        if not len(b):
            return True
        return not np.any(
            (b[:, 0] < box[2] + pad)
            & (b[:, 2] > box[0] - pad)
            & (b[:, 1] < box[3] + pad)
            & (b[:, 3] > box[1] - pad)
        )


def _text_size(text: str, points: float):
    """Generous width and height (inches) of a one-line text in DejaVu Sans."""
    return 0.62 * len(text) * points / 72 + 0.02, 1.3 * points / 72


def _draw_tips(ax, tree, trait, colours, x, y, span, per_in, inch, occupied, branch_boxes, rows):
    """Tip marks (the observed state, the possible ones side by side, hatching for unknown
    or absent), labels, and dotted leaders from tips that end short of the label column;
    drawn for the tips of rows (lo, hi), every tip's place kept in occupied.
    Returns (an unknown tip drawn, an ambiguous tip drawn)."""
    n = tree.n_tips
    lo, hi = rows
    # tips: a mark of the observed state(s), then the label; a tip that ends short of the
    # label column is joined to it by a dotted leader (a guide text may not sit on)
    tip_row = {t: i for i, t in enumerate(trait.taxa)} if trait is not None else {}
    tip_x = span + 0.08 * per_in
    short = [v for v in range(n) if x[v] < span - TIME_TREE_TOL * span]
    if short:
        ax.add_collection(
            LineCollection(
                [[(x[v], y[v]), (tip_x, y[v])] for v in short if lo <= y[v] < hi],
                colors="#9a9a9a",
                linewidths=0.6,
                linestyles=(0, (1, 2)),
                zorder=1,
            )
        )
        for v in short:
            (x0, y0), (x1, _) = inch(x[v], y[v]), inch(tip_x, y[v])
            branch_boxes.append([x0, y0 - 0.01, x1, y0 + 0.01])
    unknown = ambiguous = False
    for v in range(n):
        label = tree.tip_labels[v]
        xi, yi = inch(tip_x, y[v])
        occupied.add(
            [xi, yi - ROW * 0.4, xi + TIP_W + 0.04 + _text_size(label, FONT_TIP)[0], yi + ROW * 0.4]
        )
        if not lo <= y[v] < hi:
            continue
        ax.text(tip_x + (TIP_W + 0.05) * per_in, y[v], label, va="center", fontsize=FONT_TIP)
        if trait is None:
            continue
        i = tip_row.get(label)  # a taxon absent from the table is unknown, as in the fits
        possible = np.flatnonzero(trait.possible[i]) if i is not None else np.arange(trait.k)
        h = 0.7
        if len(possible) == len(trait.states):
            ax.add_patch(
                Rectangle(
                    (tip_x, y[v] - h / 2),
                    TIP_W * per_in,
                    h,
                    facecolor="white",
                    edgecolor="#777777",
                    hatch=UNKNOWN_HATCH,
                    lw=0.5,
                    zorder=3,
                )
            )
            unknown = True
            continue
        ambiguous |= len(possible) > 1
        w = TIP_W * per_in / len(possible)
        for k, s in enumerate(possible):
            ax.add_patch(
                Rectangle(
                    (tip_x + k * w, y[v] - h / 2),
                    w,
                    h,
                    facecolor=colours[trait.states[s]],
                    edgecolor="none",
                    zorder=3,
                )
            )
    return unknown, ambiguous


def _write_frequencies(ax, tree, order, placed, y, per_in, x_lo, inch, occupied, rows):
    """Each clade frequency below 1 beside its bar, where it touches nothing; written when
    it falls within the page's rows (lo, hi). Returns (written, left out)."""
    n = tree.n_tips
    lo, hi = rows
    n_freq = n_hidden = 0
    for v in order:
        if v not in placed or v == tree.root:
            continue
        centre, _, row, bar_w = placed[v]
        f = row["frequency"]
        if not np.isfinite(f) or f >= 0.995:
            continue
        text = f"{f:.2f}"
        tw, th = _text_size(text, FONT_FREQ)
        bx, by = inch(centre - bar_w / 2, y[v])
        bw = bar_w / per_in
        candidates = [
            (bx - tw - 0.03 - dx, y0, va)
            for dx in (0.0, 0.12, 0.24)
            for y0, va in ((by + 0.03, "bottom"), (by - th - 0.03, "top"))
        ]
        candidates += [
            (bx + (bw - tw) / 2, by + BAR_H / 2 + 0.02, "bottom"),
            (bx + (bw - tw) / 2, by - BAR_H / 2 - th - 0.02, "top"),
        ]
        for x0, y0, va in candidates:
            box = (x0, y0, x0 + tw, y0 + th)
            if occupied.free(box, pad=0.015):
                occupied.add(box)
                yt = n - 0.5 - (y0 + (0 if va == "bottom" else th)) / ROW
                y_far = yt - th / ROW if va == "bottom" else yt + th / ROW
                page = lo - 0.5 - EDGE, hi - 0.5 + EDGE
                if not (
                    lo - 0.5 <= y[v] <= hi - 0.5
                    and page[0] <= min(yt, y_far) <= max(yt, y_far) <= page[1]
                ):
                    break  # on another page (a frequency near a page's edge: clades.tsv)
                ax.text(
                    x_lo + (x0 + tw / 2) * per_in,
                    yt,
                    text,
                    ha="center",
                    va=va,
                    fontsize=FONT_FREQ,
                    color=SUPPORT_COLOUR,
                    zorder=5,
                )
                n_freq += 1
                break
        else:
            n_hidden += 1
    return n_freq, n_hidden


def _label_width(tree) -> float:
    longest = max((len(t) for t in tree.tip_labels), default=1)
    return _text_size("M" * longest, FONT_TIP)[0] * 0.85


def _legend_lines(names) -> int:
    """Lines of text in the taller of the legend's two columns (matplotlib splits the
    entries as numpy.array_split does), with its title."""
    return 1 + max(sum(t.count("\n") + 1 for t in col) for col in np.array_split(names, 2))


def _legend_height(legend) -> float:
    return LEGEND_LINE * _legend_lines([t.get_text() for t in legend.get_texts()]) + 0.1


def _axis_and_title(ax, x, n, span, states, clades, analysis, title, rooting, part=None):
    """Distances from the root, or time before present on a time tree; the title with the
    number of trees, the summary tree and the rooting; part: (lo, hi, n), the tips of a
    page."""
    ax.set_yticks([])
    for side in ("left", "right", "top"):
        ax.spines[side].set_visible(False)
    ax.spines["bottom"].set_bounds(0, span)
    tips = x[:n]
    timed = n > 1 and float(tips.max() - tips.min()) <= TIME_TREE_TOL * span  # a time tree
    ticks = [t for t in ax.get_xticks() if 0 <= t <= span]
    if timed:  # ticks at round times before present, counted back from the tips
        before = [b for b in MaxNLocator(6).tick_values(0, span) if 0 <= b <= span * (1 + 1e-9)]
        ax.set_xticks([span - b for b in before], [f"{b:g}" for b in before])
        xlabel = "time before present (the trees' branch-length units)"
    else:
        ax.set_xticks(ticks)
        xlabel = "distance from the root (branch length units)"
    ax.tick_params(axis="x", labelsize=style.BODY_TEXT)
    n_trees = int(states["n_trees"].max()) if len(states) else 0
    ax.set_xlabel(xlabel, fontsize=style.BODY_TEXT, loc="left")
    drawn_on = (
        str(clades["summary_tree"].iloc[0]) if "summary_tree" in clades and len(clades) else ""
    )
    default = (
        f"Ancestral states of '{analysis}': mean probability across trees "
        f"(up to {n_trees} tree{'' if n_trees == 1 else 's'})"
        + (f"\ndrawn on the {drawn_on}" if drawn_on else "")
    )
    roots = f"\ntrees rooted {rooting}" if rooting else ""
    page = (
        f"\ntips {part[0] + 1}-{part[1]} of {part[2]}, top to bottom (branches to other "
        "tips run on to the pages before or after)"
        if part
        else ""
    )
    ax.set_title((title or default) + roots + page, fontsize=style.BODY_TEXT + 1, loc="left")


@dataclass
class TreeKey:
    """What the legend of a state tree says: the categories and their colours, the tip
    marks drawn, the node bars left out, and where the legend sits."""

    colours: dict
    labels: list  # the categories, in the order of the bars' segments
    title: str  # the legend's title
    tip_marks: bool  # tips carry marks (a trait was given)
    ambiguous: bool  # a tip of several possible states is drawn
    unknown: bool  # a tip of unknown state is drawn
    left_out: int  # node bars that found no room
    axes_height: float  # inches: the legend starts AXIS_H below the axes
    table: str = "tables/ancestral_states.tsv"  # where the bars' values are


def _legend(ax, key: TreeKey) -> None:
    """States, tip marks, clade frequencies and the node bars left out, in one legend of
    two columns below the axis."""
    colours, labels = key.colours, key.labels
    handles = [Patch(facecolor=colours[s], label=s.replace("+", " + ")) for s in labels]
    if key.tip_marks:
        if key.ambiguous:
            handles.append(
                (Patch(facecolor=colours[labels[0]]), Patch(facecolor=colours[labels[-1]]))
            )
        if key.unknown:
            handles.append(Patch(facecolor="white", edgecolor="#777777", hatch=UNKNOWN_HATCH))
    names = [
        h.get_label() if not isinstance(h, tuple) else "tip: several states possible"
        for h in handles
    ]
    if key.tip_marks and key.unknown:
        names[-1] = "tip: state unknown"
    handles.append(Line2D([], [], ls="none", marker="$0.9$", color=SUPPORT_COLOUR, markersize=12))
    names.append(
        "clade frequency in the tree sample\n(written when below 1 and where it fits;"
        "\nall in tables/clades.tsv)"
    )
    if key.left_out:
        handles.append(Line2D([], [], ls="none"))
        names.append(
            f"{key.left_out} node bars left out: branches too\nshort to draw them apart "
            f"(values in\n{key.table})"
        )
    ax.legend(
        handles,
        names,
        title=key.title,
        loc="upper left",
        bbox_to_anchor=(0.0, -AXIS_H / key.axes_height),
        ncols=2,
        frameon=False,
        fontsize=style.BODY_TEXT,
        title_fontsize=style.BODY_TEXT + 1,
        alignment="left",
        handler_map={tuple: HandlerTuple(ndivide=None, pad=0)},
    )


def state_tree(
    tree,
    states: pd.DataFrame,
    clades: pd.DataFrame,
    trait=None,
    analysis: str = "",
    ordered: bool = False,
    colours: dict | None = None,
    title: str | None = None,
    legend_title: str | None = None,
    rooting: str = "",
    rows: tuple | None = None,
    table: str = "tables/ancestral_states.tsv",
):
    """Summary tree with mean ancestral state probabilities at its nodes.

    states: ancestral_states rows of one analysis; clades: the clade table
    (members, clade, frequency); trait: the Trait (for a pair, its joint Trait) to
    mark tip states: one colour for a known state, the possible states side by side
    for an ambiguous cell, hatching for unknown; ordered: an ordered palette.

    Every node bar is placed at its node, or slid along its own branch toward the
    root, where it touches no other bar, tip mark or label; a clade frequency below
    1 is written beside its bar where it touches nothing (all are in clades.tsv).
    colours, title, legend_title: for other categories drawn the same way (hidden classes).
    rooting: how the trees were rooted, in words (data.trees.describe_rooting), in the title.
    table: the table that holds the bars' values, named in the legend.

    Tips that end short of the label column (trees that are not ultrametric) are joined
    to their mark by a dotted leader; a taxon absent from the trait table is hatched like
    an unknown cell; a time tree (every tip at the same distance from the root) gets an
    axis of time before present, in the trees' units.

    rows: (lo, hi), a page of the tips lo..hi-1 in drawing order (top to bottom) with the
    branches that reach them; branches running on to other pages are cut at the page's
    edge. Bars and frequencies are placed on the whole tree first, so every page of one
    tree places them alike. The figure is 7 inches wide (the legend below the tree).
    """
    labels = list(dict.fromkeys(states["state"].astype(str)))
    if trait is not None:
        labels = list(trait.states)
    colours = colours or state_colours(labels, ordered)
    x, y, kids = _layout(tree)
    n = tree.n_tips
    lo, hi = rows or (0, n)
    span = max(float(x.max()), 1e-12)
    label_w = _label_width(tree)
    width = style.FULL_WIDTH
    tree_w = max(width - 0.3 - 0.4 - TIP_W * 2 - label_w - 0.1, 2.5)
    ax_w = tree_w + 0.3 + TIP_W * 2 + label_w + 0.1  # inches of the axes
    ax_h = (hi - lo + 2 * EDGE) * ROW
    fig = plt.figure(figsize=(width, ax_h + TOP + AXIS_H))  # the legend's height added below
    ax = fig.add_axes((0, 0, 1, 1))
    per_in = span / tree_w
    x_lo = -0.25 * per_in
    ax.set_xlim(x_lo, x_lo + ax_w * per_in)
    ax.set_ylim(hi - 0.5 + EDGE, lo - 0.5 - EDGE)

    def inch(xd, yd):
        return (xd - x_lo) / per_in, (n - 0.5 - yd) * ROW

    occupied = _Occupied()
    segments = []
    for v in range(tree.n_nodes):
        if v != tree.root:
            segments.append([(x[tree.parent[v]], y[v]), (x[v], y[v])])
        if v >= tree.n_tips:
            ys = [y[c] for c in kids[v]]
            segments.append([(x[v], min(ys)), (x[v], max(ys))])
    # only the branches that reach the page (the others would be clipped, yet each page's
    # SVG would carry the whole tree); every branch still takes its place below
    top, bottom = lo - 0.5 - EDGE, hi - 0.5 + EDGE
    on_page = [
        sg
        for sg in segments
        if min(sg[0][1], sg[1][1]) <= bottom and max(sg[0][1], sg[1][1]) >= top
    ]
    ax.add_collection(LineCollection(on_page, colors=BRANCH_COLOUR, linewidths=0.9, zorder=1))
    branch_boxes = []
    for (xa, ya), (xb, yb) in segments:
        (x0, y0), (x1, y1) = inch(xa, ya), inch(xb, yb)
        branch_boxes.append([min(x0, x1), min(y0, y1) - 0.01, max(x0, x1), max(y0, y1) + 0.01])

    unknown, ambiguous = _draw_tips(
        ax, tree, trait, colours, x, y, span, per_in, inch, occupied, branch_boxes, (lo, hi)
    )

    # node bars: mean probability of each state, stacked left to right
    by_members = {}
    for row in clades.to_dict("records"):
        if row["kind"] in ("consensus", "sampled", "reference", "named"):
            by_members[frozenset(str(row["members"]).split(","))] = row
    mean_of = states.set_index(["clade", "state"])["mean_probability"]
    sets = node_clades(tree)
    full_w = BAR_W * per_in
    placed, shown = {}, set()
    order = sorted(range(n, tree.n_nodes), key=lambda v: (x[v], y[v]))  # root side first
    for v in order:
        row = by_members.get(sets[v])
        if row is None:
            continue
        probs = np.array([float(mean_of.get((row["clade"], s), np.nan)) for s in labels])
        parent_x = x[tree.parent[v]] if v != tree.root else x[v] - 0.6 * full_w
        centre = None
        for scale in (1.0, 0.6):  # a narrower bar where a full one has no room
            w_in = BAR_W * scale
            for shift in np.arange(0.0, max(x[v] - parent_x, 0.0) + 1e-12, 0.1 * full_w):
                cx = x[v] - shift
                x0, yc = inch(cx - w_in * per_in / 2, y[v])
                box = (x0, yc - BAR_H / 2, x0 + w_in, yc + BAR_H / 2)
                if occupied.free(box):
                    centre = cx
                    break
            if centre is not None:
                break
        if centre is None:
            continue
        bar_w = w_in * per_in
        occupied.add(box)
        placed[v] = (centre, probs, row, bar_w)
        if not lo - 0.5 <= y[v] <= hi - 0.5:
            continue  # on another page
        shown.add(v)
        left = centre - bar_w / 2
        hh = BAR_H / ROW
        if np.all(np.isfinite(probs)):
            for s, pr in zip(labels, probs):
                ax.add_patch(
                    Rectangle(
                        (left, y[v] - hh / 2),
                        bar_w * pr,
                        hh,
                        facecolor=colours[s],
                        edgecolor="none",
                        zorder=3,
                    )
                )
                left += bar_w * pr
        ax.add_patch(
            Rectangle(
                (centre - bar_w / 2, y[v] - hh / 2),
                bar_w,
                hh,
                fill=False,
                edgecolor="black",
                lw=0.5,
                zorder=4,
            )
        )
    occupied.add(branch_boxes)
    n_freq, n_hidden = _write_frequencies(
        ax, tree, order, placed, y, per_in, x_lo, inch, occupied, (lo, hi)
    )

    left_out = len([v for v in order if by_members.get(sets[v]) is not None and v not in placed])
    if legend_title is None:
        legend_title = (
            "state" if trait is None or "+" not in labels[0] else f"{analysis} (joint state)"
        )
    key = TreeKey(
        colours, labels, legend_title, trait is not None, ambiguous, unknown, left_out, ax_h, table
    )
    _legend(ax, key)
    legend_h = _legend_height(ax.get_legend())
    height = TOP + ax_h + AXIS_H + legend_h
    fig.set_size_inches(width, height)
    ax.set_position((0.3 / width, (AXIS_H + legend_h) / height, ax_w / width, ax_h / height))
    part = (lo, hi, n) if rows and (lo, hi) != (0, n) else None
    _axis_and_title(ax, x, n, span, states, clades, analysis, title, rooting, part)
    fig.mkforest_nodes_shown = shown
    fig.mkforest_nodes_drawn = sum(np.all(np.isfinite(p[1])) for p in placed.values())
    fig.mkforest_bars_left_out = left_out
    fig.mkforest_frequencies = (n_freq, n_hidden)
    return fig


def page_rows(tree, n_labels: int) -> list:
    """(lo, hi) tip rows of each page of a state tree: as few pages as keep each within
    ``style.FULL_HEIGHT`` (title, tips, axis, and a legend of n_labels states with every
    note), the tips shared out evenly, in drawing order."""
    names = ["x"] * (n_labels + 2) + ["x\nx\nx"] * 2  # states, tip marks, both notes
    legend_h = LEGEND_LINE * _legend_lines(names) + 0.1
    fit = int((style.FULL_HEIGHT - TOP - AXIS_H - legend_h) / ROW - 2 * EDGE)
    n = tree.n_tips
    pages = max(1, int(np.ceil(n / max(fit, 1))))
    edges = np.linspace(0, n, pages + 1).round().astype(int)
    return [(int(a), int(b)) for a, b in zip(edges[:-1], edges[1:])]


def iter_state_tree_pages(tree, states: pd.DataFrame, *args, **kwargs):
    """(page name, figure) of ``state_tree``, one page at a time: "" for the first page,
    ".part2", ... for the next ones (a tree of more tips than a page holds, cut by tips in
    drawing order). A page is drawn only when the one before has been taken, so a caller
    that saves (and closes) each page holds one figure at a time, whatever the tips."""
    n_labels = len(kwargs.get("colours") or {}) or states["state"].nunique()
    if len(args) > 1 and args[1] is not None:  # the trait
        n_labels = max(n_labels, args[1].k)
    rows = page_rows(tree, n_labels)
    for i, r in enumerate(rows):
        yield (
            "" if i == 0 else f".part{i + 1}",
            state_tree(tree, states, *args, rows=r if len(rows) > 1 else None, **kwargs),
        )


def state_tree_pages(tree, states: pd.DataFrame, *args, **kwargs) -> dict:
    """{page name: figure} of every page of ``iter_state_tree_pages`` (all open at once)."""
    return dict(iter_state_tree_pages(tree, states, *args, **kwargs))


CLASS_PALETTE = "coolwarm"  # blue = slow, red = fast


def class_label(cls: int, n_classes: int) -> str:
    if cls == 1:
        return "class 1 (slowest)"
    return f"class {cls} (fastest)" if cls == n_classes else f"class {cls}"


CLASS_TABLE = "tables/ancestral_classes.tsv"  # the values a class tree draws


def _class_drawing(classes: pd.DataFrame, analysis: str, model: str):
    """The per-class rows of one analysis and model (``state`` empty; the combined-state
    rows are left to the table), labelled by class, and the keywords that draw them on a
    state tree: class colours, title, a legend naming the table."""
    rows = classes[classes["state"].isna() | (classes["state"].astype(str) == "")].copy()
    n_classes = int(rows["class"].max()) if len(rows) else 1
    rows["state"] = [class_label(int(c), n_classes) for c in rows["class"]]
    labels = [class_label(c, n_classes) for c in range(1, n_classes + 1)]
    cmap = colormaps[CLASS_PALETTE]  # the map's full range: strong ends
    colours = dict(zip(labels, [cmap(x) for x in np.linspace(0.0, 1.0, n_classes)]))
    n_trees = int(rows["n_trees"].max()) if len(rows) else 0
    title = (
        f"Hidden rate classes of '{analysis}' under model '{model}': mean "
        f"probability across trees (up to {n_trees} tree{'' if n_trees == 1 else 's'})"
    )
    if n_trees == 0:  # the bars would be empty: say why rather than draw a bare tree
        title = (
            f"Hidden rate classes of '{analysis}' under model '{model}': nothing to draw,\n"
            "no tree gives class probabilities (the model was not fitted on any tree; see\n"
            f"the caution columns of {CLASS_TABLE} and tables/model_support.tsv)"
        )
    return rows, dict(
        colours=colours,
        title=title,
        legend_title=f"rate class (values: {CLASS_TABLE}, rows without a state)",
        table=CLASS_TABLE,
    )


def class_tree(
    tree,
    classes: pd.DataFrame,
    clades: pd.DataFrame,
    analysis: str,
    model: str,
    rooting: str = "",
    rows: tuple | None = None,
):
    """Summary tree with the mean probability of each hidden rate class at its nodes
    (blue = slow, red = fast), so the clades that sit in the fast class stand out.

    classes: ancestral_classes rows of one analysis and model (the per-class rows,
    ``state`` empty, are drawn; the combined-state rows are left to the table);
    rows: (lo, hi), one page of the tips, as in ``state_tree``."""
    drawn, kwargs = _class_drawing(classes, analysis, model)
    return state_tree(tree, drawn, clades, None, analysis, rooting=rooting, rows=rows, **kwargs)


def iter_class_tree_pages(
    tree, classes: pd.DataFrame, clades: pd.DataFrame, analysis: str, model: str, rooting=""
):
    """(page name, figure) of ``class_tree``, one page at a time, cut into pages as
    ``iter_state_tree_pages``."""
    drawn, kwargs = _class_drawing(classes, analysis, model)
    return iter_state_tree_pages(tree, drawn, clades, None, analysis, rooting=rooting, **kwargs)


def class_tree_pages(
    tree, classes: pd.DataFrame, clades: pd.DataFrame, analysis: str, model: str, rooting=""
) -> dict:
    """{page name: figure} of every page of ``iter_class_tree_pages`` (all open at once)."""
    return dict(iter_class_tree_pages(tree, classes, clades, analysis, model, rooting))


CHANGE_ROW = 0.24  # inches per direction in change_counts (8-point labels)
CHANGE_PANEL = 0.95  # inches per panel beyond its rows: title, axis and its label


def _change_rows(d, pairs) -> dict:
    """{analysis: directions drawn} (double changes of a pair left out)."""
    double = [
        a in pairs and style.is_double_change(f, t)
        for a, f, t in zip(d["analysis"], d["from_state"], d["to_state"])
    ]
    d = d[~np.asarray(double, bool)]
    return {
        a: d.loc[d["analysis"] == a, ["from_state", "to_state"]].drop_duplicates().shape[0]
        for a in dict.fromkeys(d["analysis"])
    }


# most directions in one panel: an analysis of more (7 states with every rate free: 42;
# a pair with hidden classes) is split over panels of at most this many rows, each on a
# page of its own (30 rows and a panel's labels: about 8.8 of the page's 9.7 inches)
CHANGE_MAX_ROWS = 30


def change_panels(rows: dict) -> list:
    """(analysis, lo, hi, n): the panels of change_counts, the directions lo..hi-1 of an
    analysis's n in drawing order; an analysis of more than ``CHANGE_MAX_ROWS`` directions
    shared out evenly over as few panels as keep each within it."""
    out = []
    for a, n in rows.items():
        k = max(1, int(np.ceil(n / CHANGE_MAX_ROWS)))
        edges = np.linspace(0, n, k + 1).round().astype(int)
        out += [(a, int(lo), int(hi), n) for lo, hi in zip(edges[:-1], edges[1:])]
    return out


def change_pages(per_tree: pd.DataFrame, pairs: dict | None = None, states: dict | None = None):
    """{page name: figure} of ``change_counts``: "changes", "changes.part2", ...; the
    panels (``change_panels``) in order, as many on a page as fit within
    ``style.FULL_HEIGHT`` (the suptitle, then each panel's rows and labels), so no page
    grows with the number of traits or of an analysis's directions."""
    pages, height = [[]], 0.6
    for panel in change_panels(_change_rows(per_tree, pairs or {})):
        h = CHANGE_ROW * (panel[2] - panel[1]) + CHANGE_PANEL
        if pages[-1] and height + h > style.FULL_HEIGHT - 0.3:
            pages.append([])
            height = 0.6
        pages[-1].append(panel)
        height += h
    out = {}
    for i, group in enumerate(pages):
        part = (i + 1, len(pages)) if len(pages) > 1 else None
        mine = per_tree[per_tree["analysis"].isin([p[0] for p in group])]
        out["changes" if i == 0 else f"changes.part{i + 1}"] = change_counts(
            mine, pairs, states, part, group
        )
    return out


def change_counts(
    per_tree: pd.DataFrame,
    pairs: dict | None = None,
    states: dict | None = None,
    part: tuple | None = None,
    panels: list | None = None,
):
    """Expected number of changes per direction across trees, one panel per analysis,
    one row per direction: a box of the trees' values (each tree: the mean over its
    maps) with the trees as points. Changes of both traits of a pair at once are
    impossible by construction and left out. pairs: {pair: (first, second)}; states:
    {analysis: states in their declared order}, for the order of the rows; panels:
    (analysis, lo, hi, n) of ``change_panels``, a panel of the directions lo..hi-1 (every
    analysis whole when None)."""
    pairs, states = pairs or {}, states or {}
    d = per_tree.copy()
    double = [
        a in pairs and style.is_double_change(f, t)
        for a, f, t in zip(d["analysis"], d["from_state"], d["to_state"])
    ]
    d = d[~np.asarray(double, bool)]
    if panels is None:
        panels = [(a, 0, n, n) for a, n in _change_rows(per_tree, pairs).items()]
    n_rows = [hi - lo for _, lo, hi, _ in panels] or [1]
    fig, axes = plt.subplots(
        len(n_rows),
        1,
        squeeze=False,
        layout="constrained",
        figsize=(style.FULL_WIDTH, sum(CHANGE_ROW * n + CHANGE_PANEL for n in n_rows) + 0.6),
        gridspec_kw={"height_ratios": [CHANGE_ROW * n + CHANGE_PANEL for n in n_rows]},
    )
    for ax, (a, lo, hi, n_directions) in zip(axes.flat, panels):
        g = d[d["analysis"] == a].copy()
        n_all = g["tree"].nunique()
        keys = style.ordered_changes(
            zip(g["from_state"], g["to_state"]), pairs.get(a), states.get(a)
        )
        label = {k: style.change_label(*k, pairs.get(a)) for k in keys}

        g["direction"] = [label[k] for k in zip(g["from_state"], g["to_state"])]
        order = [label[k] for k in keys][lo:hi]
        counts = g["mean_count"].astype(float)
        whole_max = float(counts[np.isfinite(counts)].max()) if np.isfinite(counts).any() else 0
        g = g[g["direction"].isin(order)]
        some = f"; directions {lo + 1}-{hi} of {n_directions}" if hi - lo < n_directions else ""
        # a tree whose every map came from a fit with a rate the data do not bound has no
        # count (mkforest.jobs.ancestral.transition_tables): it is left out of the panel
        g = g[np.isfinite(g["mean_count"].astype(float))]
        if g.empty:
            ax.set_title(
                f"{a}{f' ({some[2:]})' if some else ''}",
                fontsize=style.BODY_TEXT + 1,
                loc="left",
                fontweight="bold",
            )
            ax.text(
                0.5,
                0.5,
                "no change counts: every map was drawn under a fit with a rate\n"
                "the data do not bound from above (tables/transitions.tsv)",
                ha="center",
                va="center",
                transform=ax.transAxes,
                fontsize=style.BODY_TEXT,
            )
            ax.set_xticks([])
            ax.set_yticks([])
            continue
        style.box_and_points(
            ax,
            [g.loc[g["direction"] == o, "mean_count"] for o in order],
            order,
            size=2.2,
            jitter=0.2,
        )
        n_trees = g["tree"].nunique()
        missing = n_all - n_trees
        ax.set_title(
            f"{a} ({n_trees} tree{'' if n_trees == 1 else 's'}{some})"
            + (
                f"\n{missing} of {n_all} trees left out: every map\nunder a rate the data "
                "do not bound"
                if missing
                else ""
            ),
            fontsize=style.BODY_TEXT + 1,
            loc="left",
            fontweight="bold",
        )
        ax.set_ylabel("")
        ax.set_xlabel("changes on the tree (mean of the tree's maps)", fontsize=style.BODY_TEXT)
        ax.set_xlim(left=0)
        if some and whole_max > 0:  # the panels of one analysis on one scale
            ax.set_xlim(0, 1.05 * whole_max)
        ax.tick_params(axis="y", labelsize=style.BODY_TEXT, length=0)
        ax.tick_params(axis="x", labelsize=style.BODY_TEXT)
        ax.grid(axis="x", color="#eeeeee", lw=0.6)
        ax.set_axisbelow(True)
    fig.suptitle(
        "Stochastic maps: number of changes by direction across trees"
        + (f" (part {part[0]} of {part[1]})" if part else ""),
        fontsize=style.BODY_TEXT + 2,
    )
    return fig


save = style.save
