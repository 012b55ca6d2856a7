"""The all-pairs scan as a triangular matrix of traits (tables/scan.tsv)."""

from __future__ import annotations

import numpy as np
import pandas as pd

from . import style
from .style import plt

PALETTE = style.ORDERED_MAP
WRITE_VALUES_UP_TO = 12  # traits; above this the cells are too small for numbers


def trait_order(summary: pd.DataFrame, columns=()) -> list:
    """Traits ordered so that traits found together sit together: average-linkage
    clustering of 1 - fraction of trees with a discovery (pairs not tested count as
    1), leaves in SciPy's optimal order (Bar-Joseph, Gifford & Jaakkola 2001, from
    memory). Fewer than three traits, or every pair alike, keep ``columns`` order."""
    names = [c for c in columns if c in set(summary["trait_1"]) | set(summary["trait_2"])]
    names += [
        t for t in dict.fromkeys([*summary["trait_1"], *summary["trait_2"]]) if t not in names
    ]
    n = len(names)
    if n < 3:
        return names
    from scipy.cluster.hierarchy import leaves_list, linkage
    from scipy.spatial.distance import squareform

    at = {t: i for i, t in enumerate(names)}
    d = np.ones((n, n))
    np.fill_diagonal(d, 0.0)
    for r in summary.itertuples():
        f = float(r.fraction_discovered)
        if np.isfinite(f):
            d[at[r.trait_1], at[r.trait_2]] = d[at[r.trait_2], at[r.trait_1]] = 1.0 - f
    if np.ptp(d[~np.eye(n, dtype=bool)]) == 0:
        return names  # every pair alike: nothing to group by, keep the table's order
    tree = linkage(squareform(d, checks=False), method="average", optimal_ordering=True)
    return [names[i] for i in leaves_list(tree)]


def scan_matrix(summary: pd.DataFrame, columns=(), title_note: str = ""):
    """Lower triangle of traits x traits, each cell coloured by the fraction of trees on
    which the pair is a discovery; a dot where the q-value of the median p-value is at
    most the level; pairs not tested are left blank (grey hatch)."""
    order = trait_order(summary, columns)
    n = len(order)
    at = {t: i for i, t in enumerate(order)}
    frac = np.full((n, n), np.nan)
    flagged = np.zeros((n, n), dtype=bool)
    tested = np.zeros((n, n), dtype=bool)
    for r in summary.itertuples():
        i, j = at[r.trait_1], at[r.trait_2]
        i, j = max(i, j), min(i, j)  # row below the diagonal
        tested[i, j] = True
        frac[i, j] = float(r.fraction_discovered)
        flagged[i, j] = str(r.discovered).lower() == "true"
    rows, cols = order[1:], order[:-1]
    cell = 0.5 if n <= WRITE_VALUES_UP_TO else max(0.22, 8.0 / n)
    longest = max((len(t) for t in order), default=4)
    width = 2.6 + cell * (n - 1) + 0.07 * longest
    fig, ax = plt.subplots(
        figsize=(max(5.0, width), 1.8 + cell * (n - 1) + 0.07 * longest), layout="constrained"
    )
    data = np.ma.masked_invalid(frac[1:, :-1])
    image = ax.imshow(data, cmap=PALETTE, vmin=0.0, vmax=1.0, interpolation="nearest")
    scale = plt.get_cmap(PALETTE)
    # untested pairs below the diagonal: light grey, so that they read as 'no test'
    for i in range(1, n):
        for j in range(i):
            if not tested[i, j] or not np.isfinite(frac[i, j]):
                ax.add_patch(
                    plt.Rectangle(
                        (j - 0.5, i - 1.5), 1, 1, facecolor="#dddddd", edgecolor="none", zorder=0.5
                    )
                )
    if n <= WRITE_VALUES_UP_TO:
        for i in range(1, n):
            for j in range(i):
                x = frac[i, j]
                if np.isfinite(x):
                    ax.text(
                        j,
                        i - 1 + (0.18 if flagged[i, j] else 0.0),
                        f"{x:.2f}",
                        ha="center",
                        va="center",
                        fontsize=7,
                        color=style.text_colour_on(scale(x)),
                    )
    yi, xj = np.nonzero(flagged[1:, :-1])
    if len(yi):
        marks = [style.text_colour_on(scale(frac[i + 1, j])) for i, j in zip(yi, xj)]
        ax.scatter(
            xj,
            yi - (0.18 if n <= WRITE_VALUES_UP_TO else 0.0),
            s=(12 if n <= WRITE_VALUES_UP_TO else 6),
            c=marks,
            marker="o",
            linewidths=0,
        )
    # the upper triangle and diagonal stay empty
    ax.set_xticks(range(n - 1), cols, rotation=90)
    ax.set_yticks(range(n - 1), rows)
    size = 7 if n <= 30 else 5.5
    ax.tick_params(axis="both", labelsize=size, length=2)
    ax.set_xticks(np.arange(n) - 0.5, minor=True)
    ax.set_yticks(np.arange(n) - 0.5, minor=True)
    ax.tick_params(which="minor", length=0)
    for spine in ax.spines.values():
        spine.set_visible(False)
    ax.set_xlim(-0.5, n - 1.5)
    ax.set_ylim(n - 1.5, -0.5)
    fig.colorbar(image, ax=ax, label="fraction of trees with a discovery", shrink=0.6)
    level = float(summary["level"].iloc[0]) if len(summary) else 0.05
    ax.set_title(
        f"Pairs of traits: fraction of trees on which the pair is a discovery "
        f"(Benjamini-Hochberg across pairs, level {level:g}){title_note}",
        fontsize=9,
        loc="left",
        wrap=True,
    )
    handles = []
    if len(yi):
        handles.append(
            plt.Line2D(
                [],
                [],
                marker="o",
                linestyle="",
                color="#333333",
                markersize=4,
                label="q-value of the median p-value at most the level",
            )
        )
    if (~tested[1:, :-1][np.tril_indices(n - 1)]).any():
        handles.append(plt.Rectangle((0, 0), 1, 1, facecolor="#dddddd", label="pair not tested"))
    if handles:
        fig.legend(
            handles=handles,
            loc="outside lower left",
            fontsize=7,
            frameon=False,
        )
    return fig
