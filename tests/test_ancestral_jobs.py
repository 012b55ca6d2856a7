"""Model choice per tree and the cautions of the ancestral-state tables.

Sources: Akaike weights w_i = exp(-d_i/2) / sum_j exp(-d_j/2) (Burnham & Anderson
2002 -- published source), written out here; rows of a rate matrix sum to zero
(fact of the trade).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from mkforest.engine.compare import model_weights
from mkforest.jobs.ancestral import (
    q_from_rate_rows,
    resolve_choice,
    state_table,
    transition_tables,
)


def test_model_weights_follow_akaike_formula():
    crit = np.array([104.2, 101.0, 107.9, np.inf])
    d = crit[:3] - crit[:3].min()
    expected = np.exp(-d / 2) / np.exp(-d / 2).sum()
    w = model_weights(crit, "average", ["a", "b", "c", "d"])
    np.testing.assert_allclose(w[:3], expected, rtol=1e-12)
    assert w[3] == 0.0
    np.testing.assert_array_equal(model_weights(crit, "best", list("abcd")), [0, 1, 0, 0])
    np.testing.assert_array_equal(model_weights(crit, "c", list("abcd")), [0, 0, 1, 0])
    assert not model_weights([np.inf, np.nan], "average", ["a", "b"]).any()


def test_rate_rows_to_q_and_model_fallback():
    rows = pd.DataFrame(
        {"from_state": ["x", "y", "y"], "to_state": ["y", "x", "z"], "rate": [0.5, 0.2, 1.5]}
    )
    Q = q_from_rate_rows(rows, ("x", "y", "z"))
    np.testing.assert_allclose(Q.sum(axis=1), 0.0, atol=1e-15)
    assert Q[1, 2] == 1.5 and Q[2].sum() == 0 and Q[0, 2] == 0
    choice, note = resolve_choice("stepwise", ["one_rate", "free"], "habitat")
    assert choice == "average" and "stepwise" in note and "habitat" in note
    assert resolve_choice("free", ["one_rate", "free"], "habitat") == ("free", "")


def fake_chunk(n_trees=4):
    k = 2
    prob = np.full((n_trees, 3, k), np.nan)
    prob[:, 0] = [0.7, 0.3]  # root: every tree
    prob[:1, 1] = [0.2, 0.8]  # a rare consensus clade: one tree only
    prob[:, 2] = [0.5, 0.5]  # a named clade (MRCA): every tree
    extra = np.zeros((n_trees, 3), dtype=int)
    extra[1:, 1] = -1
    extra[2, 2] = 3  # not monophyletic in one tree
    counts = np.ones((n_trees, 5, k, k), dtype=np.int32)
    dwell = np.full((n_trees, 5, k), 2.0)
    return dict(
        tree=np.arange(n_trees),
        prob=prob,
        extra=extra,
        counts=counts,
        dwell=dwell,
        weights=np.ones((n_trees, 1)),
        unconverged_weight=np.array([0.0, 0.5, 0, 0])[:n_trees],
        bound_weight=np.zeros(n_trees),
        skipped=np.zeros(n_trees, dtype=bool),
        map_model=np.zeros((n_trees, 5), dtype=np.int16),
        model_at_upper=np.zeros((n_trees, 1), dtype=bool),
        states=["off", "on"],
        models=["m"],
        clades=["root", "rare", "mine"],
        choice="average",
        choice_note="",
    )


CLADES = pd.DataFrame(
    [
        dict(
            clade="root",
            kind="consensus",
            n_tips=5,
            frequency=1.0,
            n_trees_with_clade=4,
            key="r",
            members="a,b,c,d,e",
        ),
        dict(
            clade="rare",
            kind="reference",
            n_tips=2,
            frequency=0.25,
            n_trees_with_clade=1,
            key="x",
            members="a,b",
        ),
        dict(
            clade="mine",
            kind="named",
            n_tips=2,
            frequency=0.75,
            n_trees_with_clade=3,
            key="y",
            members="c,d",
        ),
    ]
)


def test_state_table_says_what_could_mislead():
    t = state_table("sw", fake_chunk(), CLADES, n_total=4)
    assert len(t) == 6
    root = t[t["clade"] == "root"].set_index("state")
    assert root.loc["off", "mean_probability"] == 0.7 and root.loc["off", "n_trees"] == 4
    rare = t[t["clade"] == "rare"]["caution"].iloc[0]
    assert "only 25% of the trees" in rare and "only 1 tree contributes" in rare
    mine = t[t["clade"] == "mine"]["caution"].iloc[0]
    assert "not monophyletic in 1 of 4 trees" in mine and "up to 3 other tips" in mine
    assert "only 4 trees" in mine  # few trees overall
    assert "did not converge" in mine  # tree 2's fits (weight 0.5)


def test_transition_tables_pool_maps():
    trans, times, per_tree = transition_tables("sw", fake_chunk(), n_total=4)
    assert list(trans["from_state"]) == ["off", "on"] and (trans["n_maps"] == 20).all()
    assert (trans["mean_count"] == 1.0).all()
    assert (times["mean_time"] == 2.0).all() and (times["mean_fraction"] == 0.5).all()
    assert len(per_tree) == 4 * 2


def test_each_tree_set_is_summarised_on_its_own_trees():
    """tree_set_slices cuts every per-tree array by set (in the sets' order) and keeps the
    rest; clades_in_set counts a clade's frequency on that set's trees only (invented
    presence: the clade in 2 of 2 trees of 'a' and 1 of 3 of 'b'; a named MRCA always)."""
    from mkforest.jobs.ancestral import clades_in_set, tree_set_slices

    data = {
        "tree": np.array([4, 5, 1, 2, 3]),
        "tree_set": np.array(["a", "a", "b", "b", "b"]),
        "present": np.array([[1, 0], [1, 0], [1, 0], [0, 0], [0, 0]], dtype=bool),
        "prob": np.arange(5 * 2 * 2, dtype=float).reshape(5, 2, 2),
        "states": ["x", "y"],
        "choice": "average",
    }
    clades = pd.DataFrame(
        {
            "clade": ["c1", "m1"],
            "kind": ["consensus", "named_mrca"],
            "n_tips": [2, 2],
            "frequency": [0.6, np.nan],
            "n_trees_with_clade": [3, 5],
        }
    )
    sliced = tree_set_slices(data)
    assert [ts for ts, _ in sliced] == ["a", "b"]
    a, b = sliced[0][1], sliced[1][1]
    assert a["tree"].tolist() == [4, 5] and b["tree"].tolist() == [1, 2, 3]
    np.testing.assert_array_equal(b["prob"], data["prob"][2:])
    assert b["states"] == ["x", "y"] and b["choice"] == "average"
    ca, cb = clades_in_set(clades, a), clades_in_set(clades, b)
    assert ca["frequency"].tolist()[0] == 1.0 and ca["n_trees_with_clade"].tolist() == [2, 2]
    assert cb["frequency"].tolist()[0] == pytest.approx(1 / 3)
    assert cb["n_trees_with_clade"].tolist() == [1, 3]
    assert np.isnan(cb["frequency"].iloc[1])
    # chunk files of an older mkforest (no tree_set) are named, not misread
    with pytest.raises(ValueError, match="rerun the ancestral chunk jobs"):
        tree_set_slices({k: v for k, v in data.items() if k != "tree_set"})


def test_maps_under_a_branch_parameter_at_the_edge_of_its_range_are_left_out():
    """A branch-length parameter at an edge of its search box is not bounded by the data
    (seen: kappa = 3 with rates of 5,233 drew 900 changes per map on a 90-tip tree); kappa = 0
    (speciation events) and lambda's 0 and 1 are models of their own and keep their maps."""
    from mkforest.jobs.ancestral import branch_at_box_edge

    assert branch_at_box_edge("kappa", "upper")
    assert branch_at_box_edge("delta", "lower") and branch_at_box_edge("early_burst", "upper")
    assert not branch_at_box_edge("kappa", "lower")
    assert not branch_at_box_edge("lambda", "lower") and not branch_at_box_edge("lambda", "upper")
    assert not branch_at_box_edge("kappa", "") and not branch_at_box_edge("as_given", "upper")
    assert not branch_at_box_edge("kappa=3", None) and not branch_at_box_edge(None, float("nan"))
