"""Clades matched across trees, the majority-rule consensus, and named clades.

Sources:
- clade frequencies: DendroPy's split distribution over rooted trees
  (TreeList.split_distribution, bipartition encoding -- general-purpose
  reference library) against our own counts of tip sets
- majority-rule consensus: the clades found in more than half of the trees,
  which are always mutually compatible (Margush & McMorris 1981, Bull. Math.
  Biol. 43:239 -- published source, from memory); the engine builds it with
  DendroPy and the test checks it against our independent counts
- most recent common ancestor: the smallest clade containing every listed
  taxon (fact of the trade); expected nodes below are read off the Newick
  strings by hand
"""

from __future__ import annotations

import numpy as np
import pytest
from conftest import random_newick

from mkforest.data.clades import (
    check_same_taxa,
    clade_key,
    consensus_names,
    count_clades,
    find_mrca,
    majority_consensus,
    mask_of,
    node_clades,
    node_masks,
    parse_named_clades,
    taxon_bits,
    tips_in_drawing_order,
    to_dendropy,
)
from mkforest.data.trees import parse_newick
from mkforest.errors import InputError

# Six trees on taxa a..f. (a,b) is in all six, (d,e) in four, {c,d,e} in four,
# (a,b,c) in two, (e,f) in one, (b,c) in none of them.
SAMPLE = [
    "[&R] ((a:1,b:1):2,(c:2,(d:1,e:1):1):1,f:3);",
    "[&R] ((b:1,a:1):2,(c:2,(e:1,d:1):1):1,f:3);",
    "(f:3,((a:1,b:1):1,(c:1,(d:1,e:1):1):1):0.5);",
    "(((a:1,b:1):1,c:2):1,((d:1,e:1):1,f:2):1);",
    "(((a:1,b:1):1,c:2):1,(d:2,(e:1,f:1):1):1);",
    "[&R] ((a:1,b:1):2,((c:1,d:1):1,e:2):1,f:3);",
]


def sample_trees():
    return [parse_newick(s, i) for i, s in enumerate(SAMPLE)]


def test_clade_key_is_canonical():
    """The same tip set gives the same key whatever the order; other sets other keys (fact)."""
    assert clade_key(["a", "b", "c"]) == clade_key(("c", "a", "b")) == clade_key({"b", "c", "a"})
    assert clade_key(["a", "b"]) != clade_key(["a", "b", "c"])
    assert clade_key(["ab", "c"]) != clade_key(["a", "bc"])
    trees = sample_trees()
    # (a,b) is a node in every tree, numbered differently, written in different orders
    keys = [set(clade_key(s) for s in node_clades(t)) for t in trees]
    assert all(clade_key("ab") in k for k in keys)
    assert sum(clade_key("bc") in k for k in keys) == 0


def test_clade_counts_match_dendropy_split_frequencies():
    """Our counts of tip sets per tree == DendroPy's rooted split frequencies
    (general-purpose reference library), including clades absent from some trees."""
    trees = sample_trees()
    bits = taxon_bits(trees[0].tip_labels)
    counts = count_clades(trees, bits)
    n = len(trees)
    assert counts[mask_of("ab", bits)] == 6
    assert counts[mask_of("de", bits)] == 4
    assert counts[mask_of("cde", bits)] == 4
    assert counts[mask_of("abc", bits)] == 2
    assert counts[mask_of("ef", bits)] == 1
    assert mask_of("bc", bits) not in counts

    tl = to_dendropy(trees)
    sd = tl.split_distribution()
    ns = tl.taxon_namespace
    for mask, c in counts.items():
        labels = [lab for lab, i in bits.items() if mask >> i & 1]
        dmask = 0
        for lab in labels:
            dmask |= ns.taxon_bitmask(ns.get_taxon(lab))
        assert sd.split_frequencies[dmask] == pytest.approx(c / n), labels
    # and DendroPy finds no internal clade that we missed
    for dmask, f in sd.split_frequencies.items():
        labels = [t.label for t in ns if ns.taxon_bitmask(t) & dmask]
        if len(labels) > 1:
            assert counts[mask_of(labels, bits)] == pytest.approx(f * n)


@pytest.mark.parametrize("seed", range(5))
def test_consensus_holds_exactly_the_majority_clades(seed):
    """The consensus tree's clades are exactly those in more than half of the trees
    (majority rule -- published definition), counted independently of DendroPy."""
    rng = np.random.default_rng(seed)
    base = random_newick(rng, 9, p_polytomy=0.0)
    trees = [parse_newick(base, 0)]
    for i in range(1, 15):
        # a mix of the base tree and random ones, so some clades are in most trees
        text = base if rng.random() < 0.6 else random_newick(rng, 9, p_polytomy=0.0)
        trees.append(parse_newick(text, i))
    trees = [t for t in trees]
    bits = taxon_bits(trees[0].tip_labels)
    counts = count_clades(trees, bits)
    majority = {m for m, c in counts.items() if c > len(trees) / 2}
    con = majority_consensus(trees)
    got = set(node_masks(con, bits)[con.n_tips :])
    assert got == majority
    assert sorted(con.tip_labels) == sorted(trees[0].tip_labels)


def test_find_mrca_and_monophyly():
    """MRCA = smallest clade containing the listed taxa; extra tips = its other tips
    (expected values read off SAMPLE by hand)."""
    trees = sample_trees()
    sets = [node_clades(t) for t in trees]
    # {c, d, e}: a clade in trees 0-2 and 5; in trees 3 and 4 its MRCA is the root half
    # that also holds a, b (tree 3: ((a,b),c) vs ((d,e),f) -> MRCA = root, 3 extra tips)
    expected_extra = [0, 0, 0, 3, 3, 0]
    for t, s, extra in zip(trees, sets, expected_extra):
        v, n_extra = find_mrca(t, ["c", "d", "e"])
        assert n_extra == extra
        assert {"c", "d", "e"} <= s[v]
        assert all(not ({"c", "d", "e"} <= s[c]) for c in t.children_of(v))
    v, n_extra = find_mrca(trees[0], ["a", "b"])
    assert sets[0][v] == {"a", "b"} and n_extra == 0


def test_parse_named_clades_errors_name_key_and_taxon():
    """Bad named clades raise InputError naming the config key and the taxon."""
    taxa = list("abcdef")
    ok = parse_named_clades({"left": ["a", "b"], "span": {"mrca_of": ["c", "f"]}}, taxa)
    assert ok[0].members == ("a", "b") and not ok[0].mrca_only
    assert ok[1].mrca_only
    with pytest.raises(InputError, match=r"ancestral\.clades\.oops.*'zz'"):
        parse_named_clades({"oops": ["a", "zz"]}, taxa)
    with pytest.raises(InputError, match="did you mean 'a'"):
        parse_named_clades({"case": ["A", "b"]}, taxa)
    with pytest.raises(InputError, match=r"ancestral\.clades\.one.*at least two"):
        parse_named_clades({"one": ["a"]}, taxa)
    with pytest.raises(InputError, match=r"ancestral\.clades\.bad"):
        parse_named_clades({"bad": {"members": ["a", "b"]}}, taxa)
    with pytest.raises(InputError, match="ancestral.clades"):
        parse_named_clades(["a", "b"], taxa)


def test_trees_with_other_taxa_are_refused():
    trees = sample_trees() + [parse_newick("((a:1,b:1):1,(c:1,g:1):1);", 6)]
    with pytest.raises(InputError, match="tree 6.*'g'"):
        check_same_taxa(trees)


def test_consensus_names_are_unique_and_point_at_their_node():
    """Each internal node is named after the first and last tip below it in drawing order;
    the MRCA of those two tips is the node itself (fact of the trade: tips below a node
    are contiguous in a drawing), and names are unique."""
    rng = np.random.default_rng(8)
    tree = parse_newick(random_newick(rng, 12, p_polytomy=0.3))
    names = consensus_names(tree)
    assert names[tree.root] == "root"
    assert len(set(names.values())) == len(names) == tree.n_nodes - tree.n_tips
    order = tips_in_drawing_order(tree)
    assert sorted(order) == list(range(tree.n_tips))
    for v, name in names.items():
        if v == tree.root:
            continue
        _, first, last = name.split("_", 2)
        node, _ = find_mrca(tree, [first, last])
        assert node == v, name
