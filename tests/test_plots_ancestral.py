"""Ancestral-state figures: real files rendered with matplotlib, and their labels."""

from __future__ import annotations

import numpy as np
import pandas as pd
from figure_checks import overlaps, size_problems

from mkforest.data.clades import consensus_names, node_clades
from mkforest.data.traits import trait_from_mapping
from mkforest.data.trees import parse_newick
from mkforest.report import plots_ancestral

TREE = "(((a:1,b:1):1,c:2):1,((d:1,e:1):1.5,f:2.5):0.5);"
STATES = ("dry", "wet", "salt")


def tables(tree):
    names = consensus_names(tree)
    sets = node_clades(tree)
    clades, rows = [], []
    rng = np.random.default_rng(0)
    for v in range(tree.n_tips, tree.n_nodes):
        clades.append(
            dict(
                clade=names[v],
                kind="consensus",
                n_tips=len(sets[v]),
                frequency=0.8,
                n_trees_with_clade=8,
                key="k",
                members=",".join(sorted(sets[v])),
            )
        )
        p = rng.dirichlet(np.ones(3))
        for s, x in zip(STATES, p):
            rows.append(
                dict(
                    analysis="soil",
                    clade=names[v],
                    clade_kind="consensus",
                    clade_frequency=0.8,
                    n_trees=8,
                    state=s,
                    mean_probability=x,
                )
            )
    return pd.DataFrame(rows), pd.DataFrame(clades)


def test_state_tree_drawn_labelled_and_written(tmp_path):
    tree = parse_newick(TREE)
    states, clades = tables(tree)
    trait = trait_from_mapping(
        "soil",
        {"a": "dry", "b": "wet", "c": "dry|wet", "d": "?", "e": "salt", "f": "salt"},
        states=STATES,
    )
    fig = plots_ancestral.state_tree(tree, states, clades, trait, "soil")
    ax = fig.axes[0]
    assert "soil" in ax.get_title(loc="left")
    legend = [t.get_text() for t in ax.get_legend().get_texts()]
    assert set(STATES) <= set(legend)
    # c is 'dry|wet' (its two states side by side), d is unknown (hatched)
    assert {"tip: several states possible", "tip: state unknown"} <= set(legend)
    texts = {t.get_text() for t in ax.texts}
    assert set("abcdef") <= texts  # every tip labelled
    assert "0.80" in texts  # clade frequency shown
    assert fig.mkforest_nodes_drawn == tree.n_nodes - tree.n_tips
    assert overlaps(fig) == []
    paths = [tmp_path / "tree.png", tmp_path / "tree.svg"]
    plots_ancestral.save(fig, paths)
    for p in paths:
        assert p.stat().st_size > 1000
    assert paths[0].read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert b"<svg" in paths[1].read_bytes()[:500]


UNEVEN = "(((a:0.2,b:1):1,c:0.5):1,((d:1,e:0.3):1.5,f:2.5):0.5);"  # a, c, e short of 3


def test_tips_short_of_the_labels_get_leaders_and_an_absent_taxon_is_hatched(tmp_path):
    """A tree that is not ultrametric: every tip that ends short of the label column is
    joined to its mark by a leader; 'f' (in no row of the table) is drawn hatched, as the
    legend says for unknown tips; no time axis (distances from the root); the title says
    how the trees were rooted."""
    tree = parse_newick(UNEVEN)
    states, clades = tables(tree)
    trait = trait_from_mapping(
        "soil", {"a": "dry", "b": "wet", "c": "dry", "d": "wet", "e": "salt"}, states=STATES
    )
    fig = plots_ancestral.state_tree(
        tree, states, clades, trait, "soil", rooting="at the midpoint of the longest path"
    )
    ax = fig.axes[0]
    depths = tree.depths()[: tree.n_tips]
    short = int((depths < depths.max() - 1e-9).sum())
    leaders = [c for c in ax.collections if c.get_linestyle()[0][1] is not None]
    assert (
        short == 3 and len(leaders) == 1
    )  # a, c and e and len(leaders[0].get_segments()) == short
    hatched = [p for p in ax.patches if p.get_hatch()]
    assert len(hatched) == 1  # f, absent from the table
    legend = [t.get_text() for t in ax.get_legend().get_texts()]
    assert "tip: state unknown" in legend
    assert ax.get_xlabel().startswith("distance from the root")
    assert "trees rooted at the midpoint of the longest path" in ax.get_title(loc="left")
    assert overlaps(fig) == []
    plots_ancestral.save(fig, [tmp_path / "uneven.png"])


def test_time_trees_get_an_axis_of_time_before_present():
    """TREE is ultrametric (every tip 3 from the root): ticks count back from the tips."""
    tree = parse_newick(TREE)
    states, clades = tables(tree)
    fig = plots_ancestral.state_tree(tree, states, clades, None, "soil")
    ax = fig.axes[0]
    assert ax.get_xlabel().startswith("time before present")
    fig.canvas.draw()
    ticks = {
        round(float(x), 9): t.get_text() for x, t in zip(ax.get_xticks(), ax.get_xticklabels())
    }
    assert ticks[3.0] == "0" and ticks[0.0] == "3"  # the tips at 0, the root 3 before
    assert not [c for c in ax.collections if c.get_linestyle()[0][1] is not None]  # no leaders


def test_change_counts_panels(tmp_path):
    rows = []
    for analysis, states in [("soil", STATES), ("colour", ("red", "blue"))]:
        for tree in range(10):
            for a in states:
                for b in states:
                    if a != b:
                        rows.append(
                            dict(
                                analysis=analysis,
                                tree=tree,
                                from_state=a,
                                to_state=b,
                                mean_count=float(tree % 3),
                            )
                        )
    fig = plots_ancestral.change_counts(pd.DataFrame(rows))
    visible = [ax for ax in fig.axes if ax.get_visible()]
    assert [ax.get_title(loc="left") for ax in visible] == ["soil (10 trees)", "colour (10 trees)"]
    ticks = {t.get_text() for t in visible[1].get_yticklabels()}
    assert ticks == {"red → blue", "blue → red"}
    assert visible[0].get_xlabel() == "changes on the tree (mean of the tree's maps)"
    assert overlaps(fig) == []
    path = tmp_path / "changes.png"
    plots_ancestral.save(fig, [path])
    assert path.stat().st_size > 1000


def test_class_tree_draws_class_rows_only(tmp_path):
    """The class tree draws one bar segment per class (slowest first), ignores the
    combined-state rows, and names slow and fast in its legend."""
    tree = parse_newick(TREE)
    _, clades = tables(tree)
    rows = []
    for c in clades.to_dict("records"):
        fast = 0.9 if "d" in c["members"].split(",") else 0.1
        for cls, x in ((1, 1 - fast), (2, fast)):
            rows.append(
                dict(
                    analysis="soil",
                    model="two_speed",
                    clade=c["clade"],
                    n_trees=8,
                    state=np.nan,
                    mean_probability=x,
                    **{"class": cls},
                )
            )
            rows.append(
                dict(
                    analysis="soil",
                    model="two_speed",
                    clade=c["clade"],
                    n_trees=8,
                    state=f"dry@{cls}",
                    mean_probability=x,
                    **{"class": cls},
                )
            )
    fig = plots_ancestral.class_tree(tree, pd.DataFrame(rows), clades, "soil", "two_speed")
    ax = fig.axes[0]
    title = ax.get_title(loc="left")
    assert "two_speed" in title and "classes" in title
    legend = [t.get_text() for t in ax.get_legend().get_texts()]
    assert legend[:2] == ["class 1 (slowest)", "class 2 (fastest)"]
    assert fig.mkforest_nodes_drawn == tree.n_nodes - tree.n_tips
    assert overlaps(fig) == []
    path = tmp_path / "classes.png"
    plots_ancestral.save(fig, [path])
    assert path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_change_counts_panel_of_one_tree_says_tree():
    """A panel whose counts come from one tree says '1 tree' (seen on an invented 12-tree
    sample where the other trees' maps were left out as bound-limited)."""
    rows = [
        dict(analysis="colour", tree=4, from_state=a, to_state=b, mean_count=1.5)
        for a, b in (("red", "blue"), ("blue", "red"))
    ]
    fig = plots_ancestral.change_counts(pd.DataFrame(rows))
    visible = [ax for ax in fig.axes if ax.get_visible()]
    assert [ax.get_title(loc="left") for ax in visible] == ["colour (1 tree)"]


def test_class_tree_of_a_model_fitted_on_no_tree_says_so():
    """A hidden-class model fitted on no tree has class rows with n_trees 0 and no
    probabilities (seen in a real run: a pair's dependent model 'not fitted'): the title
    says nothing is drawn and why, not 'up to 0 trees' over a bare tree."""
    tree = parse_newick(TREE)
    _, clades = tables(tree)
    rows = [
        dict(
            analysis="soil",
            model="two_speed",
            clade=c["clade"],
            n_trees=0,
            state=np.nan,
            mean_probability=np.nan,
            **{"class": cls},
        )
        for c in clades.to_dict("records")
        for cls in (1, 2)
    ]
    fig = plots_ancestral.class_tree(tree, pd.DataFrame(rows), clades, "soil", "two_speed")
    title = fig.axes[0].get_title(loc="left")
    assert "nothing to draw" in title and "not fitted on any tree" in title
    assert "up to 0 trees" not in title
    assert fig.mkforest_nodes_drawn == 0
    assert overlaps(fig) == [] and size_problems(fig) == []
