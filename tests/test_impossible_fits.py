"""Fits whose data cannot arise under the model (ln L = -inf) have no estimate: their rates
are NaN, marked ``impossible`` in rates.tsv, and every summary, average, figure, bootstrap
and the ancestral stage leaves them out and counts them.

The impossible case is the one users meet: sister tips joined by zero-length branches in
different states. Two tips at distance zero have P(t = 0) = I (the transition matrix at
t = 0 is the identity: a fact of the trade, see tests/reference.py), so tips in different
states have probability zero whatever the rates. Trees whose every branch is 0 are the
extreme case and stop at the data check.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from figure_checks import overlaps

from mkforest.data.traits import trait_from_mapping
from mkforest.data.trees import parse_newick
from mkforest.engine.branches import parse_treatment
from mkforest.engine.compare import IMPOSSIBLE
from mkforest.engine.fitting import fit_model, start_sequence
from mkforest.engine.models import build_model
from mkforest.engine.pairs import Nesting
from mkforest.engine.summarise import (
    add_weights,
    averaged_rates,
    mark_duplicates,
    model_support,
    rate_summary,
)
from mkforest.errors import InputError
from mkforest.jobs.fit import fit_chunk
from mkforest.jobs.pairs import TEST_COLUMNS, bootstrap_null_rates, pair_test_rows, summary_rows
from mkforest.jobs.prepare import check_tree_lengths
from mkforest.report import plots, style

# tree 0 and 1: a and b on zero-length branches; tree 2: the same shape with lengths
TREES = [
    "((a:0,b:0):0.6,(c:0.3,d:0.3):0.3);",
    "((a:0,b:0):0.5,(c:0.2,d:0.2):0.3);",
    "((a:0.2,b:0.2):0.4,(c:0.3,d:0.3):0.3);",
]
COLOUR = {"a": "red", "b": "blue", "c": "blue", "d": "red"}


def _trees():
    return [parse_newick(text, index=i, rooted=True) for i, text in enumerate(TREES)]


def _fit_tables():
    trait = trait_from_mapping("colour", COLOUR)
    fits, rates = [], []
    for name, kind, transitions in (
        ("one", "equal", None),
        ("two", "unconstrained", None),
        ("fixed_back", "custom", {"red -> blue": "go", "blue -> red": 0.5}),
    ):
        model = build_model(kind, trait.states, transitions, name)
        f, r = fit_chunk(_trees(), trait, model, "uniform", "colour", seed=4, starts=2)
        fits += f
        rates += r
    fits = add_weights(mark_duplicates(pd.DataFrame(fits)))
    return fits, pd.DataFrame(rates)


def test_an_impossible_fit_writes_nan_rates_marked_impossible():
    fits, rates = _fit_tables()
    bad = fits[fits["tree"] < 2]
    assert np.isneginf(bad["log_likelihood"]).all()
    assert np.isfinite(fits.loc[fits["tree"] == 2, "log_likelihood"]).all()
    # no estimate: every rate of those fits, a fixed one too, is NaN and marked
    r = rates[rates["tree"] < 2]
    assert len(r) == 2 * (2 + 2 + 2) and r["rate"].isna().all()
    assert (r["at_bound"] == IMPOSSIBLE).all()
    ok = rates[rates["tree"] == 2]
    assert np.isfinite(ok["rate"]).all() and not (ok["at_bound"] == IMPOSSIBLE).any()
    # the note says impossible, and not that AICc is undefined (it is infinite for that reason)
    for note in bad["note"]:
        assert "impossible" in note and "AICc undefined" not in note
    assert (bad["n_agree"] == 0).all() and not bad["converged"].any()


def test_an_impossible_fit_has_no_branch_parameter():
    trait = trait_from_mapping("colour", COLOUR)
    model = build_model("equal", trait.states, None, "one")
    res = fit_model(
        _trees()[0],
        trait.tip_partials(_trees()[0]),
        model,
        branches=parse_treatment("kappa", "models.one.branches"),
    )
    assert res.log_likelihood == -np.inf
    assert np.isnan(res.rates).all() and np.isnan(res.branch_parameter)
    assert res.branch_at_bound == "" and res.at_lower == () and res.at_upper == ()


def test_rate_summary_leaves_impossible_fits_out_and_counts_them():
    fits, rates = _fit_tables()
    summary = rate_summary(rates, averaged_rates(fits, rates))
    s = summary.set_index(["model", "from_state", "to_state"])
    possible = rates[rates["tree"] == 2].set_index(["model", "from_state", "to_state"])["rate"]
    for key, row in s.iterrows():
        assert row["n_impossible"] == 2, key
        assert row["n_trees"] == 1 == row["n_estimated"] + row["n_unbounded"], key
        if row["n_estimated"] and key[0] != "averaged":  # the one possible tree's rate
            assert row["median_rate"] == pytest.approx(possible[key])
    # the model-averaged rate of the possible tree only
    avg = averaged_rates(fits, rates)
    assert set(avg["tree"]) == {2}
    assert s.loc[("averaged", "red", "blue"), "n_impossible"] == 2
    # every tree impossible: no median, the status says why
    only_bad = rate_summary(
        rates[rates["tree"] < 2], averaged_rates(fits[fits["tree"] < 2], rates[rates["tree"] < 2])
    )
    assert (only_bad["status"] == "impossible").all() and only_bad["median_rate"].isna().all()
    assert (only_bad["n_trees"] == 0).all() and (only_bad["n_impossible"] == 2).all()
    # model_support counts the same trees: 2 of 3 impossible, 1 used
    support = model_support(fits).set_index("model")
    assert support.loc["one", "n_impossible"] == 2 and support.loc["one", "n_trees"] == 1
    assert "2 of 3 fits are impossible" in support.loc["one", "caution"]


def test_rates_figure_counts_impossible_fits_and_draws_only_the_others():
    fits, rates = _fit_tables()
    fig = plots.rates_across_trees(rates, model_support(fits))
    (ax,) = fig.axes
    assert ax.get_title(loc="left") == "colour"
    note = ax.get_title(loc="right")
    assert note.startswith("fits impossible (ln L = −inf), not drawn")
    for m in ("one", "two", "fixed_back"):
        assert f"{m} on 2 of 3 trees" in note
    # bound counts ('k/n') are over the one possible tree
    assert all(t.get_text().endswith("/1") for t in ax.texts)
    stats = style.rate_intervals(rates)
    assert (stats["n_trees"] == 1).all()
    assert style.impossible_note(rates[rates["tree"] == 2]) == ""
    assert overlaps(fig) == []
    # every fit impossible: the panel keeps its rows, draws nothing and says why
    fig = plots.rates_across_trees(rates[rates["tree"] < 2], None)
    assert "one on 2 of 2 trees" in fig.axes[0].get_title(loc="right")
    assert [t.get_text() for t in fig.axes[0].get_yticklabels()] == ["blue → red", "red → blue"]
    assert len(fig.axes[0].texts) == 0 and overlaps(fig) == []


def test_bootstrap_never_simulates_from_an_impossible_null():
    fits, rates = _fit_tables()
    trait = trait_from_mapping("colour", COLOUR)
    models = {
        m: (build_model(k, trait.states, None, m), "uniform")
        for m, k in (("one", "equal"), ("two", "unconstrained"))
    }
    null_rates = bootstrap_null_rates([Nesting("one", "two", 1, False)], models, fits, rates)
    assert list(null_rates) == [("one", 2)]
    assert np.isfinite(null_rates[("one", 2)]).all()


def test_pair_tests_name_impossible_trees_and_count_over_the_trees_tried():
    """Trees 0 and 1 impossible under both hypotheses: not tested, counted in the caution,
    and never counted as fits that did not converge ("3 of 1 trees")."""
    fits = pd.DataFrame(
        [
            dict(
                analysis="shell",
                model=m,
                tree=t,
                n_params=k,
                log_likelihood=-np.inf if t < 2 else -10.0 - k,
                converged=t == 2,
                at_lower="",
                weight=np.nan if t < 2 else 0.5,
            )
            for t in range(3)
            for m, k in (("independent", 4), ("dependent", 8))
        ]
    )
    rows = pair_test_rows(
        "shell", [Nesting("independent", "dependent", 4, False)], fits, pd.DataFrame(), 0.05
    )
    notes = {r["tree"]: r["note"] for r in rows}
    assert "impossible under independent and dependent" in notes[0]
    (s,) = summary_rows(pd.DataFrame(rows, columns=TEST_COLUMNS), fits, 0)
    assert s["n_trees"] == 1 and s["n_impossible"] == 2 and s["n_not_converged"] == 0
    assert "2 of 3 trees left out: a fit is impossible there" in s["caution"]
    assert "did not converge" not in s["caution"]


# --------------------------------------------------------------------------- trees without length


def test_a_tree_without_length_gets_a_start_and_an_impossible_fit():
    """Every branch 0: no ZeroDivisionError in the starting rate; the fit says impossible."""
    tree = parse_newick("((a:0,b:0):0,(c:0,d:0):0);")
    trait = trait_from_mapping("colour", COLOUR)
    model = build_model("equal", trait.states, None, "one")
    starts, (lo, hi) = start_sequence(tree, trait.tip_partials(tree), model)
    assert np.isfinite(next(starts)).all() and np.isfinite([lo, hi]).all()
    res = fit_model(tree, trait.tip_partials(tree), model)
    assert res.log_likelihood == -np.inf and np.isnan(res.rates).all()


def test_trees_without_length_stop_at_the_data_check_naming_tree_and_file():
    trees = [
        parse_newick(t, index=i, rooted=True)
        for i, t in enumerate(
            ["((a:1,b:1):1,c:2);", "((a:0,b:0):0,c:0);", "((a:1,b:1):1,c:2);", "((a:0,b:0):0,c:0);"]
        )
    ]
    check_tree_lengths([trees[0], trees[2]], "tree file 'x.nwk'")
    with pytest.raises(InputError) as err:
        check_tree_lengths(trees, "tree file 'x.nwk'")
    text = str(err.value)
    assert text.startswith("tree file 'x.nwk': tree 1 (and 1 more: 3) has no length")
    assert "trees.min_branch_length" in text
