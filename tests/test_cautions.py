"""Counts in the cautions of model_support.tsv: every 'k of n' has n = the fits tried, and
impossible fits (ln L = -inf) are named as such, never as fits that did not converge."""

from __future__ import annotations

import numpy as np
import pandas as pd

from mkforest.engine.summarise import add_weights, mark_duplicates, model_support


def _fits(rows):
    cols = [
        "analysis",
        "model",
        "tree",
        "n_params",
        "log_likelihood",
        "aicc",
        "converged",
        "at_lower",
        "at_upper",
    ]
    return pd.DataFrame(rows, columns=cols)


def test_impossible_fits_are_counted_over_every_tree_tried():
    rows = []
    for tree in range(3):
        for model, k in (("one", 1), ("two", 2)):
            impossible = tree < 2
            ll = -np.inf if impossible else -5.0 - k
            rows.append(
                [
                    "colour",
                    model,
                    tree,
                    k,
                    ll,
                    np.inf if impossible else -2 * ll + 2 * k,
                    not impossible,
                    "",
                    "",
                ]
            )
    # a finite fit whose starts disagree, on the one usable tree
    rows[-1][6] = False
    support = model_support(add_weights(mark_duplicates(_fits(rows))))
    one = support.set_index("model").loc["one"]
    two = support.set_index("model").loc["two"]
    assert one["n_fits"] == 3 and one["n_impossible"] == 2 and one["n_trees"] == 1
    assert one["caution"].startswith("2 of 3 fits are impossible (ln L = -inf")
    assert "did not converge" not in one["caution"]
    assert "1 of 3 fits did not converge" in two["caution"]
    assert "only 1 tree:" in one["caution"]


def test_a_trait_that_does_not_vary_is_not_fitted_not_unconverged():
    rows = [["flat", "one", t, 1, np.nan, np.nan, False, "", ""] for t in range(4)]
    support = model_support(add_weights(mark_duplicates(_fits(rows))))
    assert support["caution"].iloc[0] == "not fitted"
    assert support["n_not_converged"].iloc[0] == 0
