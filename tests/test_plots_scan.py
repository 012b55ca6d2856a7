"""The scan's triangle figure: drawn from tables/scan.tsv-shaped data at 8 and 50 traits,
no text overlapping text or data (tests/figure_checks.py), the colours are the table's
fractions, and traits found together sit together."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from figure_checks import overlaps

from mkforest.report.plots_scan import scan_matrix, trait_order

WORDS = ["spines", "burrow", "crest", "webbing", "stripes", "night_active", "venom", "tail_club"]


def invented(n, seed=0):
    """Four groups of traits; pairs within a group found on most trees."""
    rng = np.random.default_rng(seed)
    names = [f"{WORDS[i % len(WORDS)]}_{i}" for i in range(n)]
    group = np.arange(n) % 4
    rows = []
    for i in range(n):
        for j in range(i + 1, n):
            same = group[i] == group[j]
            f = float(np.round(rng.uniform(0.7, 1.0) if same else rng.uniform(0, 0.1), 2))
            rows.append(
                {
                    "tree_set": "trees",
                    "trait_1": names[i],
                    "trait_2": names[j],
                    "alternative": "dependent",
                    "fraction_discovered": f,
                    "discovered": f > 0.8,
                    "level": 0.05,
                    "n_trees": 100,
                }
            )
    return pd.DataFrame(rows), names, group


@pytest.mark.parametrize("n", [8, 50])
def test_no_overlap_and_colours_are_the_table(n):
    summary, names, _ = invented(n)
    summary = summary.drop(index=[2])  # one pair not tested
    fig = scan_matrix(summary, names, "; independent against dependent, 100 trees")
    assert overlaps(fig) == []
    order = trait_order(summary, names)
    shown = np.ma.filled(fig.axes[0].images[0].get_array(), np.nan)
    at = {t: i for i, t in enumerate(order)}
    for r in summary.itertuples():
        i, j = sorted((at[r.trait_1], at[r.trait_2]), reverse=True)
        assert shown[i - 1, j] == r.fraction_discovered
    untested = summary.index.size == n * (n - 1) // 2 - 1
    assert untested and np.isnan(shown[np.tril_indices(n - 1)]).sum() == 1


def test_traits_found_together_sit_together():
    summary, names, group = invented(12, seed=3)
    order = trait_order(summary, names)
    g = [int(group[names.index(t)]) for t in order]
    # each group is one run of neighbours: the group changes exactly 3 times along the order
    assert sum(a != b for a, b in zip(g, g[1:])) == 3


def test_no_discovery_keeps_the_column_order():
    summary, names, _ = invented(6)
    summary["fraction_discovered"] = 0.0
    assert trait_order(summary, names) == names
