"""Clades that can be matched across a sample of trees.

A clade (a node of a rooted tree) is identified by the set of tip labels below
it; that set is the same object in every tree that has the clade, whatever the
node numbering or child order. ``clade_key`` turns it into a short canonical
string (the first 16 hex digits of SHA-256 of the sorted labels), used to key
per-tree results in files.

The summary tree of a sample is the majority-rule consensus (clades in more
than half of the trees), built with DendroPy's bipartition machinery
(``TreeList.consensus``); a user may give a reference tree instead. Clade
frequencies are counted here exactly, from the tip sets of every tree.

Named clades (from the config) come in two forms:

* a list of taxa: the clade's members. In each tree the node used is the most
  recent common ancestor (MRCA) of the listed taxa, i.e. the smallest clade
  containing all of them. When that MRCA also holds other tips, the listed taxa
  are not monophyletic in that tree: the tree still contributes (the ancestor
  of the listed taxa exists in every tree), but the count of such trees and the
  largest number of extra tips are reported, because a biologist who names a
  group expects to hear when the trees disagree that it is a group.
* ``{mrca_of: [a, b, ...]}``: the node is defined as the MRCA of a few taxa
  (e.g. two that span the group), the way nodes are often named in the
  literature; extra tips below it are expected and not flagged, but the range
  of its size across trees is reported.
"""

from __future__ import annotations

import hashlib
from collections import Counter
from dataclasses import dataclass

import dendropy
import numpy as np

from ..errors import InputError
from .trees import TreeArrays, from_dendropy, to_newick


def clade_key(labels) -> str:
    """Canonical key of a set of tip labels: 16 hex digits of SHA-256 of the sorted labels."""
    text = "\x1f".join(sorted(labels))
    return hashlib.sha256(text.encode()).hexdigest()[:16]


def node_clades(tree: TreeArrays) -> list:
    """frozenset of the tip labels below every node (tips included)."""
    if "tip_sets" not in tree._cache:
        tree._cache["tip_sets"] = tree.tip_sets()
    return tree._cache["tip_sets"]


def node_keys(tree: TreeArrays) -> list:
    """clade_key of every node (tips included)."""
    if "clade_keys" not in tree._cache:
        tree._cache["clade_keys"] = [clade_key(s) for s in node_clades(tree)]
    return tree._cache["clade_keys"]


def taxon_bits(taxa) -> dict:
    """Bit position of every taxon, in sorted label order (the same for every tree of a sample)."""
    return {lab: i for i, lab in enumerate(sorted(taxa))}


def node_masks(tree: TreeArrays, bits: dict) -> list:
    """Every node's clade as an integer bit mask over ``bits`` (tips included): a fast,
    exact stand-in for the tip-label set when all trees share their taxa."""
    masks = [1 << bits[lab] for lab in tree.tip_labels] + [0] * (tree.n_nodes - tree.n_tips)
    parent = tree.parent.tolist()
    for v in range(tree.n_nodes - 1):  # postorder: a node is complete before it joins its parent
        masks[parent[v]] |= masks[v]
    return masks


def mask_of(labels, bits: dict) -> int:
    m = 0
    for lab in labels:
        m |= 1 << bits[lab]
    return m


def labels_of(mask: int, bits: dict) -> frozenset:
    return frozenset(lab for lab, i in bits.items() if mask >> i & 1)


def count_clades(trees, bits: dict | None = None) -> Counter:
    """How many trees contain each clade (internal nodes only), keyed by bit mask over
    ``bits`` (default: taxon_bits of the first tree)."""
    bits = bits or taxon_bits(trees[0].tip_labels)
    counts: Counter = Counter()
    for tree in trees:
        counts.update(node_masks(tree, bits)[tree.n_tips :])
    return counts


def check_same_taxa(trees, source="the tree sample") -> tuple:
    """The sorted taxon labels shared by every tree; InputError naming a tree and taxon otherwise."""
    first = set(trees[0].tip_labels)
    for t in trees[1:]:
        other = set(t.tip_labels)
        if other != first:
            extra = sorted(other - first)
            lacking = sorted(first - other)
            what = (
                f"has taxon '{extra[0]}' that tree {trees[0].index} lacks"
                if extra
                else f"lacks taxon '{lacking[0]}'"
            )
            raise InputError(
                f"{source}: tree {t.index} {what}; every tree must have the same taxa "
                "to match clades across trees."
            )
    return tuple(sorted(first))


def to_dendropy(trees, taxa=None) -> dendropy.TreeList:
    """A DendroPy TreeList (rooted, one shared taxon namespace) of TreeArrays."""
    ns = dendropy.TaxonNamespace(list(taxa)) if taxa else dendropy.TaxonNamespace()
    text = "\n".join("[&R] " + to_newick(t) for t in trees)
    return dendropy.TreeList.get(
        data=text,
        schema="newick",
        taxon_namespace=ns,
        preserve_underscores=True,
        rooting="force-rooted",
    )


def majority_consensus(trees, min_freq: float = 0.5) -> TreeArrays:
    """Majority-rule consensus of rooted trees (clades in more than ``min_freq`` of them),
    by DendroPy's TreeList.consensus. Branch lengths: DendroPy's mean length of each
    clade's branch over the trees that have it."""
    taxa = check_same_taxa(trees)
    tl = to_dendropy(trees, taxa)
    con = tl.consensus(
        min_freq=min_freq,
        set_edge_lengths="mean-length",
        add_node_age_summaries_as_node_annotations=False,
        add_edge_length_summaries_as_edge_annotations=False,
    )
    for nd in con.postorder_node_iter():
        if nd.edge.length is None:
            nd.edge.length = 0.0
    return from_dendropy(con, 0, "consensus tree", rooted=True)


# --------------------------------------------------------------------------- drawing order and names


def ladder_children(tree: TreeArrays) -> list:
    """Children of every node in drawing order: smaller clades first, ties broken by the
    alphabetically first tip, so the order is the same however the tree was written."""
    sets = node_clades(tree)
    first = [min(s) for s in sets]
    return [
        sorted(tree.children_of(v).tolist(), key=lambda c: (len(sets[c]), first[c]))
        for v in range(tree.n_nodes)
    ]


def tips_in_drawing_order(tree: TreeArrays) -> list:
    """Tip node numbers top to bottom as drawn with ladder_children."""
    kids = ladder_children(tree)
    out = []
    stack = [tree.root]
    while stack:
        v = stack.pop()
        if v < tree.n_tips:
            out.append(v)
        else:
            stack.extend(reversed(kids[v]))
    return out


def consensus_names(tree: TreeArrays) -> dict:
    """Name of every internal node: 'root', else 'clade_<first>_<last>' with the first and
    last tip below it in drawing order (the two tips whose MRCA it is, read off the figure)."""
    order = tips_in_drawing_order(tree)
    rank = {v: i for i, v in enumerate(order)}
    names = {}
    below_first = {}
    below_last = {}
    for v in range(tree.n_nodes):
        if v < tree.n_tips:
            below_first[v] = below_last[v] = v
            continue
        kids = tree.children_of(v)
        below_first[v] = min((below_first[c] for c in kids), key=rank.get)
        below_last[v] = max((below_last[c] for c in kids), key=rank.get)
        names[v] = f"clade_{tree.tip_labels[below_first[v]]}_{tree.tip_labels[below_last[v]]}"
    names[tree.root] = "root"
    return names


# --------------------------------------------------------------------------- named clades


@dataclass(frozen=True)
class NamedClade:
    """A clade named in the config: ``members`` listed taxa; ``mrca_only`` True for the
    {mrca_of: [...]} form (extra tips below the MRCA are expected)."""

    name: str
    members: tuple
    mrca_only: bool = False


def parse_named_clades(value, taxa, where: str = "ancestral.clades") -> list:
    """Named clades from the config value {name: [taxon, ...] | {mrca_of: [taxon, ...]}},
    checked against the taxa of the trees; InputError naming the key and taxon otherwise."""
    if value is None:
        return []
    if not isinstance(value, dict):
        raise InputError(
            f"config key '{where}' must map clade names to lists of taxa, "
            f"e.g. {{my_group: [taxon_a, taxon_b]}}; got {type(value).__name__}."
        )
    taxa = set(taxa)
    out = []
    for name, spec in value.items():
        key = f"{where}.{name}"
        mrca_only = False
        if isinstance(spec, dict):
            if set(spec) != {"mrca_of"}:
                raise InputError(
                    f"config key '{key}': use a list of member taxa or "
                    f"{{mrca_of: [taxon, taxon]}}; unknown keys {sorted(set(spec) - {'mrca_of'})}."
                )
            spec = spec["mrca_of"]
            mrca_only = True
        if not isinstance(spec, (list, tuple)) or not all(isinstance(x, str) for x in spec):
            raise InputError(f"config key '{key}' must be a list of taxon names.")
        members = tuple(dict.fromkeys(spec))
        if len(members) < 2:
            raise InputError(
                f"config key '{key}' lists {len(members)} taxon; a clade needs at "
                "least two taxa (the ancestor of one taxon is not a clade)."
            )
        unknown = [x for x in members if x not in taxa]
        if unknown:
            close = sorted(t for t in taxa if t.lower() == unknown[0].lower())
            hint = f" (did you mean '{close[0]}'?)" if close else ""
            raise InputError(
                f"config key '{key}': taxon '{unknown[0]}' is in none of the trees{hint}."
            )
        out.append(NamedClade(str(name), members, mrca_only))
    return out


def find_mrca(tree: TreeArrays, members) -> tuple:
    """(node, n_extra): the smallest node whose tips include every member, and how many
    other tips it holds (0 when the members form a clade in this tree)."""
    want = set(members)
    is_member = np.array([lab in want for lab in tree.tip_labels], dtype=np.int64)
    if is_member.sum() != len(want):
        missing = sorted(want - set(tree.tip_labels))
        raise InputError(f"tree {tree.index} lacks taxon '{missing[0]}'.")
    below = np.zeros(tree.n_nodes, dtype=np.int64)
    size = np.zeros(tree.n_nodes, dtype=np.int64)
    below[: tree.n_tips] = is_member
    size[: tree.n_tips] = 1
    for v in range(tree.n_nodes - 1):  # postorder: children before parents
        p = tree.parent[v]
        below[p] += below[v]
        size[p] += size[v]
    for v in range(tree.n_tips, tree.n_nodes):
        if below[v] == len(want):
            return v, int(size[v] - len(want))
    raise AssertionError("the root holds every tip")
