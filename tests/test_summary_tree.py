"""The summary tree of the ancestral stage: the majority-rule consensus, polytomies and all,
or the sampled tree with the highest product of clade frequencies.

Outside references: DendroPy (general-purpose library): TreeList.consensus for the
majority-rule consensus and TreeList.maximum_product_of_split_support_tree for the
sampled tree with the highest product of split supports (the common practice this option
follows).
"""

from __future__ import annotations

import numpy as np
import pytest
from catalogue_inputs import unresolved_sample
from conftest import random_newick
from dendropy.calculate import treecompare

from mkforest.data.clades import to_dendropy
from mkforest.data.trees import parse_newick, to_newick
from mkforest.jobs.ancestral import target_clades


@pytest.mark.parametrize("seed", range(4))
def test_most_supported_tree_is_dendropys_choice(seed):
    rng = np.random.default_rng(seed)
    shapes = [random_newick(rng, 7, p_polytomy=0.0, p_zero=0.0) for _ in range(3)]
    # topologies with 4, 3 and 2 copies (distinct supports, no ties), shuffled
    texts = [shapes[0]] * 4 + [shapes[1]] * 3 + [shapes[2]] * 2
    texts = [texts[i] for i in rng.permutation(len(texts))]
    trees = [parse_newick(t, i) for i, t in enumerate(texts)]
    table, summary = target_clades(trees, summary="most_supported")
    tl = to_dendropy(trees)
    best = tl.maximum_product_of_split_support_tree(include_external_splits=False)
    ours = to_dendropy([summary], trees[0].tip_labels)[0]
    ours.migrate_taxon_namespace(tl.taxon_namespace)
    assert treecompare.symmetric_difference(ours, best, is_bipartitions_updated=False) == 0
    assert (table["kind"] == "sampled").all()
    assert table["summary_tree"].iloc[0].startswith(f"sampled tree {summary.index} ")
    # the chosen tree is the first of the most frequent topology
    first = min(i for i, t in enumerate(texts) if t == shapes[0])
    assert summary.index == first


def test_unresolved_consensus_is_a_star_reported_as_such():
    texts = unresolved_sample(n_trees=5, n_tips=8, seed=3)
    trees = [parse_newick(t, i) for i, t in enumerate(texts)]
    table, summary = target_clades(trees)
    # DendroPy's majority-rule consensus of the same trees: no internal clade either
    con = to_dendropy(trees).consensus(min_freq=0.5)
    assert len(con.seed_node.child_nodes()) == 8
    assert len(summary.children_of(summary.root)) == 8
    assert list(table["clade"]) == ["root"]
    assert "unresolved" in table["summary_tree"].iloc[0]
    # written and read back by mkforest as a rooted tree, never as an unrooted one
    again = parse_newick("[&R] " + to_newick(summary), rooted=True)
    assert again.n_tips == 8 and len(again.children_of(again.root)) == 8
