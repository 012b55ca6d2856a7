"""Stochastic character maps against outside references.

Sources:
- a map is a history of the trait drawn from its posterior given the tip data
  (Nielsen 2002, Syst. Biol. 51:729; Huelsenbeck, Nielsen & Bollback 2003,
  Syst. Biol. 52:131 -- published sources): its tip states must be allowed by
  the data and it can never use fewer changes than the Fitch parsimony score
  (Fitch 1971, Syst. Zool. 20:406 -- published source), cross-checked here with
  DendroPy's Fitch down pass (general-purpose reference library).
- expected number of i -> j changes and expected time in state i on a branch of
  length t, given its end states a and b (Minin & Suchard 2008, J. Math. Biol.
  56:391 -- published source):
      E[N_ij | a, b] = q_ij  int_0^t P_ai(s) P_jb(t - s) ds / P_ab(t)
      E[T_i  | a, b] =       int_0^t P_ai(s) P_ib(t - s) ds / P_ab(t)
  evaluated with scipy.integrate.quad and scipy.linalg.expm (general-purpose
  reference libraries). Over a whole tree the expectation is the sum over
  branches of these, weighted by the joint posterior of each branch's end
  states, which is enumerated here over every node's state.
- Monte Carlo tolerance: a mean of N maps is compared with its expectation
  within 4.5 standard errors (sample standard deviation / sqrt(N)); with the
  number of comparisons made here, a correct sampler fails by chance with
  probability below 1e-3 (normal tail, fact of the trade), and the seeds are
  fixed, so the outcome is reproducible.
- dwell times on a tree add up to its total branch length; a change whose rate
  is zero never happens; maps from the same seed are identical (facts of the trade).
"""

from __future__ import annotations

import itertools

import dendropy
import numpy as np
import pytest
import scipy.integrate
import scipy.linalg
from conftest import partials_from_cells, random_case, random_newick, yule_arrays
from dendropy.model.parsimony import fitch_down_pass
from reference import newick_from_arrays, q_from_rates

from mkforest.data.trees import parse_newick
from mkforest.engine.ancestral import ImpossibleData
from mkforest.engine.fitting import fitch_score
from mkforest.engine.mapping import (
    SEGMENT_JUMPS,
    mixed_stochastic_maps,
    stochastic_maps,
    summarise,
)

Z = 4.5  # standard errors allowed between a Monte Carlo mean and its expectation


# --------------------------------------------------------------------------- references


def expected_on_branch(Q, t, a, b):
    """(E[N_ij | a, b] [k, k], E[T_i | a, b] [k]) by numerical integration (Minin & Suchard 2008)."""
    Q = np.asarray(Q, dtype=float)
    k = Q.shape[0]
    P = lambda s: scipy.linalg.expm(Q * s)  # noqa: E731
    pab = P(t)[a, b]
    counts = np.zeros((k, k))
    dwell = np.zeros(k)
    if t == 0:
        dwell[a] = 0.0
        return counts, dwell
    opts = dict(epsabs=1e-11, epsrel=1e-10, limit=200)
    for i in range(k):
        dwell[i] = (
            scipy.integrate.quad(lambda s: P(s)[a, i] * P(t - s)[i, b], 0, t, **opts)[0] / pab
        )
        for j in range(k):
            if i != j and Q[i, j] > 0:
                counts[i, j] = (
                    Q[i, j]
                    * scipy.integrate.quad(lambda s: P(s)[a, i] * P(t - s)[j, b], 0, t, **opts)[0]
                    / pab
                )
    return counts, dwell


def enumerate_branch_joint(tree, partials, Q, prior):
    """Joint posterior of (parent state, child state) for every branch, summing over the
    states of every node (tips weighted by their data); prior on the root state given."""
    Q = np.asarray(Q, dtype=float)
    k = Q.shape[0]
    n = tree.n_nodes
    P = [scipy.linalg.expm(Q * float(tree.length[v])) for v in range(n)]
    J = np.zeros((n, k, k))
    for combo in itertools.product(range(k), repeat=n):
        w = prior[combo[tree.root]]
        for v in range(tree.n_tips):
            w *= partials[v, combo[v]]
        if w == 0.0:
            continue
        for v in range(n - 1):
            w *= P[v][combo[tree.parent[v]], combo[v]]
        for v in range(n - 1):
            J[v, combo[tree.parent[v]], combo[v]] += w
    return J / J[0].sum()


def assert_mc_mean(samples, expected, what):
    samples = np.asarray(samples, dtype=float)
    mean = samples.mean(axis=0)
    se = samples.std(axis=0, ddof=1) / np.sqrt(samples.shape[0])
    bad = np.abs(mean - expected) > Z * se + 1e-12
    assert not bad.any(), (
        f"{what}: Monte Carlo mean\n{mean}\nexpected\n{expected}\nstandard error\n{se}"
    )


# --------------------------------------------------------------------------- parsimony reference


def dendropy_fitch(newick, cells, states):
    """Fitch score with DendroPy's fitch_down_pass (bifurcating trees only)."""
    taxa = dendropy.TaxonNamespace()
    tree = dendropy.Tree.get(
        data=newick,
        schema="newick",
        taxon_namespace=taxa,
        preserve_underscores=True,
        rooting="force-rooted",
    )
    sets = {}
    for taxon in taxa:
        cell = cells[taxon.label]
        sets[taxon] = [
            set(range(len(states))) if cell == "?" else {states.index(s) for s in cell.split("|")}
        ]
    return fitch_down_pass(
        tree.postorder_node_iter(), taxon_state_sets_map=sets, state_sets_attr_name=None
    )


def test_fitch_score_matches_dendropy():
    """fitting.fitch_score == DendroPy's Fitch down pass on random bifurcating trees with
    missing and ambiguous tips (Fitch 1971; DendroPy, general-purpose library)."""
    differing = 0
    for seed in range(30):
        rng = np.random.default_rng(500 + seed)
        k = int(rng.integers(2, 5))
        states = [f"s{i}" for i in range(k)]
        newick = random_newick(rng, int(rng.integers(4, 12)), p_polytomy=0.0)
        tree = parse_newick(newick)
        cells = {}
        for label in tree.tip_labels:
            u = rng.random()
            if u < 0.1:
                cells[label] = "?"
            elif u < 0.3:
                cells[label] = "|".join(sorted(rng.choice(states, size=2, replace=False)))
            else:
                cells[label] = states[int(rng.integers(k))]
        partials = partials_from_cells(cells, tree.tip_labels, states)
        expected = dendropy_fitch(newick, cells, states)
        assert fitch_score(tree, partials) == expected, (seed, newick, cells)
        differing += expected > 0
    assert differing > 20


def test_fitch_score_hand_example():
    """((a,b),(c,d)) with states 0,1,0,1 needs two changes; 0,0,1,1 one (Fitch 1971;
    worked by hand -- fact of the trade)."""
    tree = parse_newick("((a:1,b:1):1,(c:1,d:1):1);")
    alt = np.array([[1, 0], [0, 1], [1, 0], [0, 1.0]])
    assert fitch_score(tree, alt) == 2
    assert fitch_score(tree, np.array([[1, 0], [1, 0], [0, 1], [0, 1.0]])) == 1


# --------------------------------------------------------------------------- every map is valid


@pytest.mark.parametrize("seed", range(24))
def test_maps_respect_data_rates_and_parsimony(seed):
    """Every map: tip states allowed by the data, no change along a zero-length branch,
    no change whose rate is zero, at least the Fitch score of changes, dwell summing to
    the tree length (Nielsen 2002; Fitch 1971 -- published sources; facts of the trade)."""
    case = random_case(seed)
    states, Q = case["states"], case["Q"]
    tree = parse_newick(case["newick"])
    partials = partials_from_cells(case["cells"], tree.tip_labels, states)
    root = ["uniform", "data_weighted", states[0]][seed % 3]
    try:
        maps = stochastic_maps(
            tree, partials, Q, 300, np.random.default_rng(seed), root, tuple(states)
        )
    except ImpossibleData:
        pytest.skip("data impossible under this root treatment (checked in test_impossible_data)")
    ns = maps.node_states
    assert (partials[np.arange(tree.n_tips)[None, :], ns[:, : tree.n_tips]] > 0).all()
    zero = np.flatnonzero((tree.length == 0) & (tree.parent >= 0))
    assert (ns[:, zero] == ns[:, tree.parent[zero]]).all()
    forbidden = (Q == 0) & ~np.eye(len(states), dtype=bool)
    assert (maps.counts[:, forbidden] == 0).all()
    assert (np.diagonal(maps.counts, axis1=1, axis2=2) == 0).all()
    assert (maps.n_changes >= fitch_score(tree, partials)).all()
    np.testing.assert_allclose(maps.dwell.sum(axis=1), tree.total_length, rtol=1e-12)
    if root == states[0]:
        assert (ns[:, tree.root] == 0).all()
    # a change between the two ends of a branch implies at least one change on it
    ends_differ = (ns[:, :-1] != ns[:, tree.parent[:-1]]).sum(axis=1)
    assert (maps.n_changes >= ends_differ).all()


def test_impossible_data():
    """Data that the model cannot produce raise ImpossibleData instead of giving maps."""
    tree = parse_newick("((a:0,b:0):0.3,c:0.5);")
    partials = np.array([[1.0, 0.0], [0.0, 1.0], [1.0, 0.0]])
    with pytest.raises(ImpossibleData):
        stochastic_maps(tree, partials, q_from_rates(np.ones((2, 2))), 5, np.random.default_rng(0))


# --------------------------------------------------------------------------- expectations

CYCLE = q_from_rates([[0, 2.0, 0.1], [0.1, 0, 2.0], [2.0, 0.1, 0]])  # complex eigenvalues
THREE = q_from_rates([[0, 0.6, 0.2], [0.9, 0, 0.4], [0.3, 1.1, 0]])
IRREVERSIBLE = q_from_rates([[0, 1.2, 0.0], [0.0, 0, 0.7], [0.0, 0.0, 0]])
# a fast pair and a slow exit: mu t is large but the chain is far from mixed, so the
# states drawn at the cuts of a long branch matter
SLOW_EXIT = q_from_rates([[0, 5.0, 0.0], [5.0, 0, 0.03], [0.02, 0.0, 0]])

BRANCH_CASES = [
    # (Q, branch length, start state, end state)
    (THREE, 0.4, 0, 2),
    (THREE, 1.7, 1, 1),
    (CYCLE, 1.3, 0, 0),
    (CYCLE, 0.8, 2, 1),
    (IRREVERSIBLE, 1.5, 0, 2),
    # long branches: mu t > SEGMENT_JUMPS, so the sampler cuts them into segments
    (SLOW_EXIT, 12.0, 0, 2),
    (THREE, 45.0, 2, 0),
]


@pytest.mark.parametrize("case", range(len(BRANCH_CASES)))
def test_single_branch_counts_and_dwell(case):
    """One branch with fixed end states: mean counts of every i -> j and mean time in every
    state over 20,000 maps agree with the integrals of Minin & Suchard (2008) within
    4.5 standard errors. The tree is (x:t, y:0) rooted at y's state: y sits on a
    zero-length branch, so the root equals y's observed state (P(0) = I)."""
    Q, t, a, b = BRANCH_CASES[case]
    k = Q.shape[0]
    tree = parse_newick(f"(x:{t!r},y:0);")
    partials = np.zeros((2, k))
    partials[tree.tip_labels.index("x"), b] = 1.0
    partials[tree.tip_labels.index("y"), a] = 1.0
    maps = stochastic_maps(tree, partials, Q, 20000, np.random.default_rng(77 + case))
    if case >= len(BRANCH_CASES) - 2:
        assert np.max(-np.diag(Q)) * t > SEGMENT_JUMPS  # the long-branch path is exercised
    exp_counts, exp_dwell = expected_on_branch(Q, t, a, b)
    assert_mc_mean(maps.counts.reshape(len(maps.counts), -1), exp_counts.ravel(), "counts")
    assert_mc_mean(maps.dwell, exp_dwell, "dwell")


@pytest.mark.parametrize("seed,root", [(3, "uniform"), (11, "data_weighted"), (6, "fixed")])
def test_whole_tree_expectation(seed, root):
    """Mean counts and dwell over 20,000 maps on a small random tree (polytomy, ambiguous
    and missing tips) equal sum over branches of the joint end-state posterior times the
    branch expectations (Minin & Suchard 2008; Nielsen 2002 -- published sources)."""
    rng = np.random.default_rng(seed)
    k = 3
    states = ["p", "q", "r"]
    Q = q_from_rates(rng.uniform(0.2, 1.5, size=(k, k)))
    newick = random_newick(rng, 5, p_polytomy=0.5, p_zero=0.0)
    tree = parse_newick(newick)
    cells = {lab: states[int(rng.integers(k))] for lab in tree.tip_labels}
    cells[tree.tip_labels[0]] = "?"
    cells[tree.tip_labels[1]] = "p|r"
    partials = partials_from_cells(cells, tree.tip_labels, states)
    if root == "fixed":
        root, prior = "q", np.array([0.0, 1.0, 0.0])
    elif root == "uniform":
        prior = np.full(k, 1.0 / k)
    else:
        # data-weighted root: prior = L_i / sum L (FitzJohn et al. 2009), L by enumeration
        flat = enumerate_branch_joint(tree, partials, Q, np.ones(k))
        L = flat[tree.children_of(tree.root)[0]].sum(axis=1)  # root marginal under a flat prior
        prior = L / L.sum()
    J = enumerate_branch_joint(tree, partials, Q, prior)
    exp_counts = np.zeros((k, k))
    exp_dwell = np.zeros(k)
    for v in range(tree.n_nodes - 1):
        for a in range(k):
            for b in range(k):
                if J[v, a, b] < 1e-15:
                    continue
                c, d = expected_on_branch(Q, tree.length[v], a, b)
                exp_counts += J[v, a, b] * c
                exp_dwell += J[v, a, b] * d
    maps = stochastic_maps(
        tree, partials, Q, 20000, np.random.default_rng(seed), root, tuple(states)
    )
    assert_mc_mean(maps.counts.reshape(len(maps.counts), -1), exp_counts.ravel(), "counts")
    assert_mc_mean(maps.dwell, exp_dwell, "dwell")
    # the sampled node states follow the joint posterior too
    for v in range(tree.n_tips, tree.n_nodes):
        marg = J[tree.children_of(v)[0]].sum(axis=1)
        onehot = maps.node_states[:, v][:, None] == np.arange(k)[None, :]
        assert_mc_mean(onehot, marg, f"node {v} state")


# --------------------------------------------------------------------------- mixtures, seeds, size


def test_mixture_draws_models_by_weight():
    """Each map's model is drawn with probability weight / sum (Akaike-weight mixture);
    a model of weight 0 is never used; the fraction is within 4.5 binomial standard errors."""
    tree = parse_newick("((a:0.3,b:0.2):0.4,(c:0.5,d:0.1):0.2);")
    partials = np.array([[1, 0], [0, 1], [1, 1], [1, 0.0]])
    fits = [
        (q_from_rates(np.ones((2, 2))), "uniform", 0.75),
        (q_from_rates([[0, 2.0], [0.5, 0]]), "data_weighted", 0.25),
        (q_from_rates([[0, 9.0], [9.0, 0]]), "uniform", 0.0),
    ]
    maps = mixed_stochastic_maps(tree, partials, fits, 4000, np.random.default_rng(1))
    assert maps.n_maps == 4000
    assert not (maps.model == 2).any()
    frac = (maps.model == 0).mean()
    assert abs(frac - 0.75) < Z * np.sqrt(0.75 * 0.25 / 4000)


def test_skipped_fits_draw_no_maps_and_leave_the_others_unchanged():
    """A fit marked skip gets its share of maps by weight, but they are empty (counts 0,
    dwell NaN, node states -1) and drawing them or not leaves the other fits' maps as they
    are (each fit has its own stream). Weight split: the mixture test above."""
    tree = parse_newick("((a:0.3,b:0.2):0.4,(c:0.5,d:0.1):0.2);")
    partials = np.array([[1, 0], [0, 1], [1, 1], [1, 0.0]])
    fits = [  # the skipped fit first: drawn, it would come first in a shared stream
        (q_from_rates([[0, 900.0], [900.0, 0]]), "uniform", 0.5),
        (q_from_rates([[0, 2.0], [0.5, 0]]), "uniform", 0.5),
    ]
    every = mixed_stochastic_maps(tree, partials, fits, 200, np.random.default_rng(3))
    some = mixed_stochastic_maps(
        tree, partials, fits, 200, np.random.default_rng(3), skip=[True, False]
    )
    np.testing.assert_array_equal(every.model, some.model)
    drawn, skipped = some.model == 1, some.model == 0
    assert drawn.any() and skipped.any()
    np.testing.assert_array_equal(every.counts[drawn], some.counts[drawn])
    np.testing.assert_array_equal(every.dwell[drawn], some.dwell[drawn])
    assert every.counts[skipped].sum() > 100 * skipped.sum()  # fast: many changes per map
    assert (some.counts[skipped] == 0).all() and np.isnan(some.dwell[skipped]).all()
    assert (some.node_states[skipped] == -1).all()


def test_maps_reproducible_from_seed():
    """Same seed, same maps; another seed, other maps (fact of the trade)."""
    case = random_case(4)
    tree = parse_newick(case["newick"])
    partials = partials_from_cells(case["cells"], tree.tip_labels, case["states"])
    one = stochastic_maps(tree, partials, case["Q"], 50, np.random.default_rng(9))
    two = stochastic_maps(tree, partials, case["Q"], 50, np.random.default_rng(9))
    three = stochastic_maps(tree, partials, case["Q"], 50, np.random.default_rng(10))
    np.testing.assert_array_equal(one.counts, two.counts)
    np.testing.assert_array_equal(one.dwell, two.dwell)
    np.testing.assert_array_equal(one.node_states, two.node_states)
    assert not np.array_equal(one.dwell, three.dwell)


def test_large_tree_maps():
    """1,000 tips: maps are finite, dwell sums to the tree length, changes >= Fitch score."""
    rng = np.random.default_rng(3)
    labels, parent, length = yule_arrays(rng, 1000, height=1.0)
    tree = parse_newick(newick_from_arrays(labels, parent, length))
    Q = q_from_rates([[0, 3.0, 1.0], [2.0, 0, 0.5], [1.0, 1.0, 0]])
    partials = np.eye(3)[rng.integers(0, 3, size=tree.n_tips)]
    maps = stochastic_maps(tree, partials, Q, 50, rng, "stationary")
    np.testing.assert_allclose(maps.dwell.sum(axis=1), tree.total_length, rtol=1e-10)
    assert (maps.n_changes >= fitch_score(tree, partials)).all()


def test_summarise_rows():
    """summarise: one row per direction and per state, means equal to numpy's (library)."""
    rng = np.random.default_rng(0)
    counts = rng.integers(0, 5, size=(200, 3, 3))
    dwell = rng.uniform(0, 1, size=(200, 3))
    out = summarise(counts, dwell, ("a", "b", "c"))
    assert len(out["transitions"]) == 6 and len(out["dwell"]) == 3
    row = next(r for r in out["transitions"] if r["from_state"] == "b" and r["to_state"] == "c")
    assert row["mean"] == pytest.approx(counts[:, 1, 2].mean())
    assert row["upper"] == pytest.approx(np.quantile(counts[:, 1, 2], 0.975))
    assert out["dwell"][0]["mean_fraction"] == pytest.approx((dwell[:, 0] / dwell.sum(1)).mean())
