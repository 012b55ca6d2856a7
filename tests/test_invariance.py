"""Invariances of the likelihood (no outside value needed).

ln L must not change when
- the states are relabelled (state order permuted in Q, tip data and root),
- the taxa are listed in another order / the children of nodes are rotated,
- every branch length is multiplied by c and every rate divided by c
  (P depends on Q t only),
- a zero-length internal branch is collapsed into a polytomy (P(0) = I).
All are facts of the trade; tolerance 1e-9 absolute on ln L.
"""

from __future__ import annotations

import numpy as np
import pytest
from conftest import partials_from_cells, random_case, random_newick, tip_data_mapping
from reference import newick_from_arrays, q_from_rates, ref_tree_from_newick

from mkforest.data.traits import trait_from_mapping
from mkforest.data.trees import parse_newick
from mkforest.engine.fitting import fit_model
from mkforest.engine.likelihood import log_likelihood
from mkforest.engine.models import build_model

TOL = 1e-9


def _medium_case(seed, n_tips=30):
    """A 30-tip random tree with polytomies and zero lengths, and data under a random Q."""
    rng = np.random.default_rng(3000 + seed)
    k = int(rng.integers(2, 6))
    states = [f"st{i}" for i in range(k)]
    off = rng.uniform(0.05, 2.5, size=(k, k))
    off[rng.random((k, k)) < 0.2] = 0.0
    Q = q_from_rates(off)
    newick = random_newick(rng, n_tips, p_polytomy=0.25, p_zero=0.1)
    ref_tree = ref_tree_from_newick(newick)
    cells = tip_data_mapping(rng, ref_tree, Q, states)
    return rng, states, Q, newick, ref_tree, cells


def _roots(states):
    return ["uniform", "data_weighted", "stationary", *states]


def _lnl(tree, cells, states, Q, root):
    partials = partials_from_cells(cells, tree.tip_labels, states)
    return log_likelihood(tree, partials, Q, root=root, states=tuple(states))


@pytest.mark.parametrize("seed", range(12))
def test_relabelling_states(seed):
    """Permute the state order in Q, the tip data and the root label: ln L unchanged."""
    rng, states, Q, newick, _, cells = _medium_case(seed)
    tree = parse_newick(newick)
    perm = rng.permutation(len(states))  # new state i is old state perm[i]
    new_states = [states[p] for p in perm]
    Q_new = Q[np.ix_(perm, perm)]
    # rename the labels too, so nothing can lean on the label spelling
    rename = {s: f"z{j}" for j, s in enumerate(rng.permutation(states))}
    renamed = [rename[s] for s in new_states]
    new_cells = {
        t: c if c == "?" else "|".join(rename[s] for s in c.split("|")) for t, c in cells.items()
    }
    for root in _roots(states):
        before = _lnl(tree, cells, states, Q, root)
        new_root = rename[root] if root in states else root
        after = _lnl(tree, new_cells, renamed, Q_new, new_root)
        if np.isinf(before):
            assert after == before, root
        else:
            assert abs(after - before) <= TOL, (root, before, after)


@pytest.mark.parametrize("seed", range(12))
def test_rotating_children_and_reordering_taxa(seed):
    """The same tree written with the children of every node in a random order (so the
    taxa come in another order): ln L unchanged."""
    rng, states, Q, newick, ref_tree, cells = _medium_case(seed)
    tree = parse_newick(newick)
    rotated_text = newick_from_arrays(
        ref_tree.tip_labels, ref_tree.parent, ref_tree.length, rng=rng
    )
    rotated = parse_newick(rotated_text)
    assert rotated_text != newick
    assert set(rotated.tip_labels) == set(tree.tip_labels)
    for root in _roots(states):
        a = _lnl(tree, cells, states, Q, root)
        b = _lnl(rotated, cells, states, Q, root)
        assert (a == b) if np.isinf(a) else abs(a - b) <= TOL, (root, a, b)


@pytest.mark.parametrize("c", [1e-3, 0.37, 4.0, 1e3])
@pytest.mark.parametrize("seed", range(4))
def test_rescaling_lengths_and_rates(seed, c):
    """Branch lengths x c and rates / c: P(t) = expm(Q t) unchanged, so ln L unchanged."""
    _, states, Q, newick, ref_tree, cells = _medium_case(seed)
    tree = parse_newick(newick)
    scaled = parse_newick(
        newick_from_arrays(ref_tree.tip_labels, ref_tree.parent, ref_tree.length * c)
    )
    for root in _roots(states):
        a = _lnl(tree, cells, states, Q, root)
        b = _lnl(scaled, cells, states, Q / c, root)
        assert (a == b) if np.isinf(a) else abs(a - b) <= TOL, (root, a, b)


@pytest.mark.parametrize("seed", range(6))
def test_zero_length_branch_equals_polytomy(seed):
    """((a,b):0,c) is the polytomy (a,b,c): a zero-length branch has P(0) = I."""
    rng = np.random.default_rng(4000 + seed)
    la, lb, lc, ld, le = rng.exponential(0.5, size=5)
    la, lb, lc, ld, le = (float(x) for x in (la, lb, lc, ld, le))
    resolved = f"(((a:{la!r},b:{lb!r}):0,c:{lc!r}):{le!r},d:{ld!r});"
    polytomy = f"((a:{la!r},b:{lb!r},c:{lc!r}):{le!r},d:{ld!r});"
    states = ["p", "q", "r"]
    Q = q_from_rates(rng.uniform(0.1, 2.0, size=(3, 3)))
    cells = dict(zip("abcd", rng.choice(["p", "q", "r", "p|q", "?"], size=4)))
    for root in _roots(states):
        a = _lnl(parse_newick(resolved), cells, states, Q, root)
        b = _lnl(parse_newick(polytomy), cells, states, Q, root)
        assert abs(a - b) <= TOL, (root, a, b)


def test_trait_table_row_order_does_not_matter():
    """Tip data are matched to the tree by taxon name, not by row position."""
    case = random_case(5)
    tree = parse_newick(case["newick"])
    items = list(case["cells"].items())
    a = trait_from_mapping("t", dict(items), states=case["states"]).tip_partials(tree)
    b = trait_from_mapping("t", dict(reversed(items)), states=case["states"]).tip_partials(tree)
    np.testing.assert_array_equal(a, b)


def test_custom_model_with_permuted_state_order():
    """The same custom model declared over a permuted state order gives the permuted Q."""
    states = ("small", "medium", "large")
    transitions = {
        "small -> medium -> large": "grow",
        "large -> medium": "shrink",
        "medium -> small": 0.25,
    }
    rates = {"grow": 1.3, "shrink": 0.4}
    m1 = build_model("custom", states, transitions)
    order = ("large", "small", "medium")
    m2 = build_model("custom", order, transitions)
    perm = [states.index(s) for s in order]
    q1 = m1.q_matrix([rates[lab] for lab in m1.labels])
    q2 = m2.q_matrix([rates[lab] for lab in m2.labels])
    np.testing.assert_allclose(q2, q1[np.ix_(perm, perm)], atol=0)


def test_maximum_likelihood_is_invariant_to_state_order():
    """The fitted unconstrained model reaches the same maximum whatever the state order
    (to 1e-6: three separate optimisations). The case has an interior maximum (checked);
    maxima at a rate bound are covered in test_fitting_reference."""
    rng = np.random.default_rng(4)
    states = ["u", "v", "w"]
    Q = q_from_rates([[0, 1.0, 0.4], [0.7, 0, 1.2], [0.3, 0.9, 0]])
    newick = random_newick(rng, 60, p_polytomy=0.1, p_zero=0.05, mean_length=0.3)
    ref_tree = ref_tree_from_newick(newick)
    cells = tip_data_mapping(rng, ref_tree, Q, states, p_missing=0.1, p_ambiguous=0.1)
    tree = parse_newick(newick)
    best = []
    for order in (states, states[::-1], [states[1], states[2], states[0]]):
        model = build_model("unconstrained", order)
        partials = partials_from_cells(cells, tree.tip_labels, list(order))
        fit = fit_model(tree, partials, model, n_starts=3, seed=3)
        assert not fit.at_lower and not fit.at_upper and fit.rates.min() > 0.05
        best.append(fit.log_likelihood)
    assert max(best) - min(best) <= 1e-6, best
