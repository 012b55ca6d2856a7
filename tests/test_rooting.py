"""Rooting unrooted samples (trees.root), checked against DendroPy.

Outside references: DendroPy (general-purpose library) for tip-to-tip path
lengths (PhylogeneticDistanceMatrix), unrooted topology comparison
(treecompare.symmetric_difference) and its own midpoint rooting; the midpoint
root halving the longest tip-to-tip path is the definition of midpoint rooting
(fact of the trade).
"""

from __future__ import annotations

import itertools

import dendropy
import numpy as np
import pytest
from conftest import random_newick
from dendropy.calculate import treecompare

from mkforest.data.trees import read_trees, to_newick
from mkforest.errors import InputError


def _unrooted_text(rng, n_tips):
    """A random tree with a basal trifurcation (the shape of a sample from a non-clock analysis)."""
    text = random_newick(rng, n_tips, p_polytomy=0.0, p_zero=0.0)
    tree = dendropy.Tree.get(
        data=text, schema="newick", rooting="force-unrooted", preserve_underscores=True
    )
    tree.deroot()  # the root's two branches become one; the base splits three ways
    return tree.as_string(schema="newick", suppress_rooting=True).strip()


def _distances(newick_text, ns):
    tree = dendropy.Tree.get(
        data=newick_text, schema="newick", taxon_namespace=ns, preserve_underscores=True
    )
    pdm = tree.phylogenetic_distance_matrix()
    taxa = sorted(ns, key=lambda t: t.label)
    return {(a.label, b.label): pdm.distance(a, b) for a, b in itertools.combinations(taxa, 2)}


def _write(tmp_path, texts):
    path = tmp_path / "sample.nwk"
    path.write_text("\n".join(texts) + "\n")
    return path


@pytest.mark.parametrize("seed", range(6))
def test_outgroup_rooting_keeps_the_tree_and_puts_the_outgroup_at_the_base(tmp_path, seed):
    rng = np.random.default_rng(seed)
    text = _unrooted_text(rng, 9)
    ns = dendropy.TaxonNamespace()
    original = dendropy.Tree.get(
        data=text,
        schema="newick",
        taxon_namespace=ns,
        rooting="force-unrooted",
        preserve_underscores=True,
    )
    # an outgroup that is a clade of the unrooted tree: the tips below a random internal
    # node, seen from a tip hung at the base
    rooted_copy = dendropy.Tree(original)
    rooted_copy.reroot_at_edge(rooted_copy.leaf_nodes()[0].edge)
    inner = [nd for nd in rooted_copy.internal_nodes() if nd is not rooted_copy.seed_node]
    node = inner[int(rng.integers(len(inner)))]
    outgroup = sorted(lf.taxon.label for lf in node.leaf_iter())
    [ours] = read_trees(_write(tmp_path, [text]), root={"outgroup": outgroup})
    ours_text = to_newick(ours)
    # 1. the root's children: the outgroup on one side, everything else on the other
    sets = ours.tip_sets()
    kids = [sets[c] for c in ours.children_of(ours.root)]
    assert frozenset(outgroup) in kids
    # 2. the same unrooted tree (DendroPy's symmetric difference of bipartitions)
    mine = dendropy.Tree.get(
        data=ours_text,
        schema="newick",
        taxon_namespace=ns,
        rooting="force-unrooted",
        preserve_underscores=True,
    )
    assert treecompare.symmetric_difference(original, mine) == 0
    # 3. every tip-to-tip path length unchanged (DendroPy's distance matrix)
    before, after = _distances(text, ns), _distances(ours_text, ns)
    for pair, d in before.items():
        assert after[pair] == pytest.approx(d, abs=1e-9)
    # 4. the root sits halfway along the outgroup's branch
    a, b = ours.children_of(ours.root)
    assert ours.length[a] == pytest.approx(ours.length[b], abs=1e-12)


@pytest.mark.parametrize("seed", range(6))
def test_midpoint_rooting_matches_dendropy_and_halves_the_longest_path(tmp_path, seed):
    rng = np.random.default_rng(100 + seed)
    text = _unrooted_text(rng, 10)
    ns = dendropy.TaxonNamespace()
    [ours] = read_trees(_write(tmp_path, [text]), root="midpoint")
    depth = ours.depths()[: ours.n_tips]
    diameter = max(_distances(text, ns).values())
    # closed form: the two ends of the longest path are each half of it from the root
    assert depth.max() == pytest.approx(diameter / 2, abs=1e-9)
    assert np.sort(depth)[-2] == pytest.approx(diameter / 2, abs=1e-9)
    # DendroPy's own midpoint rooting gives the same root-to-tip distances
    ref = dendropy.Tree.get(
        data=text,
        schema="newick",
        taxon_namespace=ns,
        rooting="force-unrooted",
        preserve_underscores=True,
    )
    ref.reroot_at_midpoint(update_bipartitions=True)
    ref_depth = {lf.taxon.label: lf.distance_from_root() for lf in ref.leaf_node_iter()}
    for v, label in enumerate(ours.tip_labels):
        assert depth[v] == pytest.approx(ref_depth[label], abs=1e-9)


def test_unrooted_without_a_rooting_names_the_key(tmp_path):
    path = _write(tmp_path, ["(a:1,b:1,(c:1,d:1):1);"])
    with pytest.raises(InputError) as err:
        read_trees(path)
    text = str(err.value)
    assert "tree 0" in text and "trees.root" in text and "[&R]" in text and "sample.nwk" in text


def test_outgroup_that_is_not_a_clade_names_the_tree_and_an_intruder(tmp_path):
    path = _write(tmp_path, ["(a:1,b:1,(c:1,d:1):1);", "(a:1,c:1,(b:1,d:1):1);"])
    with pytest.raises(InputError) as err:
        read_trees(path, root={"outgroup": ["a", "b"]})
    text = str(err.value)
    assert "tree 1" in text and "not a clade" in text and ("'c'" in text or "'d'" in text)


def test_outgroup_taxon_not_in_the_tree_suggests_the_spelling(tmp_path):
    path = _write(tmp_path, ["(Alpha:1,b:1,(c:1,d:1):1);"])
    with pytest.raises(InputError, match="did you mean 'Alpha'"):
        read_trees(path, root={"outgroup": ["alpha"]})
