"""Figures of a trait pair: the joint-state diagram and the tests across trees.

Each function returns a matplotlib Figure (tests read its texts);
mkforest.report.plots.save writes it.
"""

from __future__ import annotations

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
from matplotlib.lines import Line2D  # noqa: E402
from matplotlib.patches import FancyArrowPatch, FancyBboxPatch  # noqa: E402
from scipy.stats import chi2  # noqa: E402

FIRST_COLOUR = "#9a4f2c"     # changes of the first trait (vertical in the diagram)
SECOND_COLOUR = "#2c6a8a"    # changes of the second trait (horizontal)
NODE_FACE = "#f4efe6"
MAX_WIDTH = 5.0
MIN_WIDTH = 0.6
MAX_LABELLED = 16      # above this many arrows in a panel, rates are not written on them


def _layout(pair):
    """Centre of every joint state's box, and the box size, from the label lengths."""
    longest = max(len(s) for s in pair.states)
    box_w = 0.13 * longest + 0.35
    dx, dy = box_w + 1.5, 2.1
    pos = {pair.joint(i, j): (j * dx, -i * dy) for i in range(pair.k1) for j in range(pair.k2)}
    return pos, box_w


def _panel_diagram(ax, pair, rates: dict, top: float, title: str):
    """One hypothesis: joint states on a grid (first trait down, second across),
    an arrow per allowed change with width proportional to its median rate
    (full width at ``top`` and above)."""
    pos, box_w = _layout(pair)
    for s, (x, y) in pos.items():
        ax.add_patch(FancyBboxPatch((x - box_w / 2, y - 0.3), box_w, 0.6,
                                    boxstyle="round,pad=0.02,rounding_size=0.18",
                                    facecolor=NODE_FACE, edgecolor="#5a5a5a", lw=0.9, zorder=3))
        ax.text(x, y, pair.states[s], ha="center", va="center", fontsize=8, zorder=4)
    many = len(rates) > MAX_LABELLED
    for (a, b), rate in rates.items():
        (i1, j1), (i2, j2) = pair.split(a), pair.split(b)
        vertical = j1 == j2
        colour = FIRST_COLOUR if vertical else SECOND_COLOUR
        steps = abs(i1 - i2) + abs(j1 - j2)
        rad = 0.2 + 0.22 * (steps - 1)
        share = min(rate / top, 1.0) if top > 0 else 0.0
        width = MIN_WIDTH + (MAX_WIDTH - MIN_WIDTH) * share
        faint = top > 0 and rate < 1e-3 * top
        (xa, ya), (xb, yb) = pos[a], pos[b]
        # start and end just outside the boxes, along the direction of travel
        ux, uy = np.sign(xb - xa), np.sign(yb - ya)
        gap_x, gap_y = box_w / 2 + 0.08, 0.38
        start = (xa + ux * gap_x, ya + uy * gap_y)
        end = (xb - ux * gap_x, yb - uy * gap_y)
        arrow = FancyArrowPatch(start, end, connectionstyle=f"arc3,rad={rad}",
                                arrowstyle="-|>", mutation_scale=7 + width * 1.4,
                                lw=MIN_WIDTH if faint else width, color=colour,
                                alpha=0.45 if faint else 0.85, linestyle=":" if faint else "-",
                                shrinkA=0, shrinkB=0, zorder=2)
        ax.add_patch(arrow)
        if not many:
            # the arc bulges to the right of the direction of travel; the label sits beyond it
            dx, dy = xb - xa, yb - ya
            dist = np.hypot(dx, dy) or 1.0
            nx, ny = dy / dist, -dx / dist
            off = 0.5 * rad * dist + (0.42 if vertical else 0.22)
            text = f"{rate:.2g}" + ("+" if rate > top else "")
            ax.text((xa + xb) / 2 + nx * off, (ya + yb) / 2 + ny * off, text, ha="center",
                    va="center", fontsize=6.5, color=colour, zorder=5,
                    bbox=dict(boxstyle="round,pad=0.1", fc="white", ec="none", alpha=0.8))
    xs = [p[0] for p in pos.values()]
    ys = [p[1] for p in pos.values()]
    ax.set_xlim(min(xs) - box_w / 2 - 0.8, max(xs) + box_w / 2 + 0.8)
    ax.set_ylim(min(ys) - 1.0, max(ys) + 1.0)
    ax.set_aspect("equal")
    ax.axis("off")
    ax.set_title(title, fontsize=9)


def width_scale(values) -> float:
    """Rate drawn at full width: the largest rate, but at most 20 times the median
    positive rate, so one runaway estimate (a rate at its upper bound) does not
    shrink every other arrow to a hairline. Larger rates are labelled with '+'."""
    v = np.asarray([x for x in values if np.isfinite(x) and x > 0], dtype=float)
    if not v.size:
        return 0.0
    return float(min(v.max(), 20.0 * np.median(v)))


def _split_class(label: str) -> tuple:
    """'a+b@2' -> ('a+b', '@', '2'); a label without a class -> (label, '', '')."""
    state, sep, cls = label.rpartition("@")
    return (state, sep, cls) if sep and cls.isdigit() else (label, "", "")


def pair_diagram(pair, rate_summary: pd.DataFrame, support: pd.DataFrame | None = None):
    """One panel per hypothesis (and the model average when present): median rate across
    trees of every allowed change between joint states, as arrow widths on one shared
    scale. ``rate_summary``: the rate_summary.tsv rows of this pair."""
    r = rate_summary[rate_summary["analysis"] == pair.name]
    models = list(dict.fromkeys(r["model"]))
    if "averaged" in models:          # the model average last
        models.remove("averaged")
        models.append("averaged")
    index = {s: i for i, s in enumerate(pair.states)}
    panels = []
    for m in models:
        d = r[r["model"] == m]
        # with hidden rate classes the states are 'joint@class': one panel per class, its
        # changes within the class (class switches do not change the joint state)
        by_class = {}
        for f, t, x in zip(d["from_state"].astype(str), d["to_state"].astype(str), d["median_rate"]):
            (f, _, cf), (t, _, ct) = _split_class(f), _split_class(t)
            if cf == ct and f in index and t in index and np.isfinite(x) \
                    and (m != "averaged" or x > 0):
                by_class.setdefault(cf, {})[(index[f], index[t])] = float(x)
        for c in sorted(by_class) or [""]:
            panels.append((f"{m}, class {c}" if c else m, by_class.get(c, {})))
    top = width_scale([x for _, rt in panels for x in rt.values()])
    n = max(len(panels), 1)
    cols = min(n, 3)
    rows = int(np.ceil(n / cols))
    pos, box_w = _layout(pair)
    w = 0.45 * (max(p[0] for p in pos.values()) + box_w + 1.6)
    h = 0.45 * (2.1 * (pair.k1 - 1) + 2.0) + 0.5
    # at least wide enough for the title and the legend
    fig, axes = plt.subplots(rows, cols, figsize=(max(cols * w + 0.4, 7.5), rows * h + 1.2),
                             squeeze=False)
    weights = {}
    if support is not None and len(support):
        s = support[support["analysis"] == pair.name]
        weights = dict(zip(s["model"], s["mean_weight"]))
    for ax, (m, rates) in zip(axes.flat, panels):
        title = m.replace("averaged", "model average", 1) if m.startswith("averaged") else m
        name = m.split(", class ")[0]
        if name in weights and np.isfinite(weights[name]):
            title += f"\nmean weight {weights[name]:.2f}"
        _panel_diagram(ax, pair, rates, top, title)
    for ax in list(axes.flat)[len(panels):]:
        ax.set_visible(False)
    handles = [Line2D([], [], color=FIRST_COLOUR, lw=3, label=f"{pair.first.name} changes"),
               Line2D([], [], color=SECOND_COLOUR, lw=3, label=f"{pair.second.name} changes"),
               Line2D([], [], color="#777777", lw=MIN_WIDTH, ls=":",
                      label="rate near zero (< 0.1% of the widest)")]
    fig.legend(handles=handles, loc="lower center", ncol=3, fontsize=7.5, frameon=False)
    labelled = all(len(rt) <= MAX_LABELLED for _, rt in panels)
    fig.suptitle(f"{pair.name}: median rates across trees between joint states "
                 f"({pair.first.name}+{pair.second.name})\narrow width ∝ rate"
                 + ("" if labelled else "; values in tables/rate_summary.tsv"), fontsize=10)
    fig.tight_layout(rect=(0, 0.06, 1, 0.94))
    return fig


def pair_tests_figure(pair_name: str, tests: pd.DataFrame, bootstrap: pd.DataFrame):
    """Per test (one row of panels): the LR statistic on every tree against the chi-square
    critical value; the bootstrap null distribution with the observed statistics."""
    t = tests[tests["pair"] == pair_name]
    b = bootstrap[bootstrap["pair"] == pair_name] if len(bootstrap) else bootstrap
    keys = list(dict.fromkeys(zip(t["null"], t["alternative"])))
    n = max(len(keys), 1)
    fig, axes = plt.subplots(n, 2, figsize=(10, 3.4 * n), squeeze=False)
    if not keys:
        for ax in axes.flat:
            ax.axis("off")
        axes[0, 0].text(0.5, 0.5, f"{pair_name}: no nested hypotheses to test",
                        ha="center", va="center", transform=axes[0, 0].transAxes)
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
        ax.axvline(crit, color="black", lw=1.2, ls="--",
                   label=f"χ² {1 - alpha:.0%} point, df {df}: {crit:.2f}")
        if stat.size:
            ax.axvline(np.median(stat), color=SECOND_COLOUR, lw=1.2,
                       label=f"median across trees: {np.median(stat):.2f}")
        ax.set_ylim(-0.5, 1.35)      # the band above the points holds the legend
        ax.set_yticks([])
        ax.set_xlim(left=0, right=max(crit, stat.max() if stat.size else 0) * 1.12 + 0.5)
        ax.set_xlabel("likelihood-ratio statistic 2 (ln L alternative − ln L null)")
        ax.set_title(f"{null} vs {alt}\n{int(above.sum())} of {stat.size} trees reject "
                     f"at {alpha:g} (χ²)", fontsize=9)
        ax.legend(fontsize=7, loc="upper center", ncol=2, framealpha=0.85)
        ax = axes[row, 1]
        sims = b[(b["null"] == null) & (b["alternative"] == alt)] if len(b) else b
        if len(sims) == 0:
            ax.axis("off")
            ax.text(0.5, 0.5, "no parametric bootstrap\n(set pairs.<name>.bootstrap > 0)",
                    ha="center", va="center", fontsize=9, transform=ax.transAxes)
            continue
        x = sims["statistic"].to_numpy(float)
        x = x[np.isfinite(x)]
        boot_trees = sorted(set(sims["tree"]))
        obs = g[g["tree"].isin(boot_trees)]["statistic"].to_numpy(float)
        hi = max(np.quantile(x, 0.995), obs.max() if obs.size else 0, crit) * 1.1 + 0.5
        heights, _, _ = ax.hist(x, bins=np.linspace(0, hi, 40), density=True, color="#cfd8d3",
                edgecolor="#7f948a", lw=0.5, label=f"simulated under {null} "
                f"({len(x)} data sets, {len(boot_trees)} trees)")
        grid = np.linspace(1e-3, hi, 300)
        ax.plot(grid, chi2.pdf(grid, df), color="black", lw=1, ls="--", label=f"χ², df {df}")
        ax.axvline(float(np.quantile(x, 1 - alpha)), color="#555555", lw=1, ls=":",
                   label=f"bootstrap {1 - alpha:.0%} point")
        for i, o in enumerate(obs):
            ax.axvline(o, color=FIRST_COLOUR, lw=1.3, alpha=0.8,
                       label="observed (per tree)" if i == 0 else None)
        ax.set_xlim(0, hi)
        ax.set_ylim(0, 1.3 * max(heights.max(), 1e-9))
        ax.set_xlabel("likelihood-ratio statistic")
        ax.set_ylabel("density")
        ax.set_title(f"parametric bootstrap\n{null} vs {alt}", fontsize=9)
        ax.legend(fontsize=6.5, loc="upper right", framealpha=0.85)
    fig.suptitle(f"{pair_name}: likelihood-ratio tests across trees", fontsize=10)
    fig.tight_layout(rect=(0, 0, 1, 0.96))
    return fig
