"""Two traits as one chain (mkforest.engine.pairs) against outside references.

Sources, beside each check:
- two binary traits as one four-state chain; simultaneous change of both traits
  has rate 0; independent 4 rates, dependent 8, one trait depending on the other
  6; likelihood-ratio test independent vs dependent on 4 degrees of freedom --
  Pagel (1994) Proc. R. Soc. B 255:37 (published source)
- brute-force sum over every assignment of joint states to interior nodes, with
  P(t) from scipy.linalg.expm -- Felsenstein (1981) J. Mol. Evol. 17:368
  (published source: the sum that pruning replaces) and scipy (general-purpose
  reference library); the joint rate matrices are written out here from the
  hypotheses' definitions, not taken from the engine
- exp((Q1 (+) Q2) t) = exp(Q1 t) (x) exp(Q2 t) for the Kronecker sum
  Q1 (+) Q2 = Q1 (x) I + I (x) Q2 -- handbook identity of matrix functions
  (e.g. Horn & Johnson, Topics in Matrix Analysis, ch. 4; from memory),
  checked here with scipy.linalg.expm
- data-weighted root weights L_i / sum_j L_j (FitzJohn, Maddison & Otto 2009,
  Syst. Biol. 58:595 -- published source)
- parametric bootstrap p-value (1 + #{T* >= T}) / (N + 1) -- Goldman (1993)
  J. Mol. Evol. 36:182 for the test; the +1 form is common practice (Davison &
  Hinkley 1997, ch. 4; from memory)
- chi-square upper 5 % point on 4 degrees of freedom, 9.488 -- handbook table
  (Abramowitz & Stegun 1964, Table 26.8), cross-checked with scipy.stats.chi2
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest
import scipy.linalg
from conftest import random_newick, yule_newick
from reference import q_from_rates, ref_tree_from_newick
from scipy.stats import binom, chi2

from mkforest.data.traits import trait_from_mapping
from mkforest.data.trees import parse_newick
from mkforest.engine import pairs
from mkforest.engine.fitting import LogLikelihood, fit_model
from mkforest.engine.likelihood import log_likelihood
from mkforest.engine.models import build_model
from mkforest.engine.simulate import simulate_states
from mkforest.errors import InputError

ROOTS = ("uniform", "stationary", "data_weighted")
LIMB = ("absent", "present")
VISITOR = ("bee", "moth")
COLOUR = ("white", "pink", "violet")


# --------------------------------------------------------------------------- helpers


def random_cells(rng, taxa, states, p_missing=0.15, p_ambiguous=0.15):
    """Text cells: a state, '?' or an ambiguous 'a|b' (ambiguity only with 3+ states)."""
    cells = {}
    for t in taxa:
        u = rng.random()
        if u < p_missing:
            cells[t] = "?"
        elif u < p_missing + p_ambiguous and len(states) > 2:
            cells[t] = "|".join(sorted(rng.choice(states, size=2, replace=False), key=states.index))
        else:
            cells[t] = states[int(rng.integers(len(states)))]
    return cells


def simulated_cells(rng, tree, states, rate=0.8, p_missing=0.1):
    """Cells simulated on the tree under equal rates (so the data carry phylogenetic
    signal and the likelihood has an interior maximum), with some '?'."""
    k = len(states)
    q = q_from_rates(np.full((k, k), rate))
    nodes = simulate_states(tree, q, rng)
    return {
        t: "?" if rng.random() < p_missing else states[nodes[v]]
        for v, t in enumerate(tree.tip_labels)
    }


def make_pair(rng, taxa, states1=LIMB, states2=VISITOR, name="limb_visitor"):
    first = trait_from_mapping("limb", random_cells(rng, taxa, states1), states=list(states1))
    second = trait_from_mapping("visitor", random_cells(rng, taxa, states2), states=list(states2))
    return pairs.make_pair(name, first, second)


def expected_joint_q(states1, states2, rate_of):
    """Joint Q written out from a hypothesis's definition: rate_of(trait, a, b, background)
    gives the rate of trait ('limb' or 'visitor') changing a -> b while the other trait is
    in state `background`; changes of both traits at once get rate 0 (Pagel 1994)."""
    joint = [(a, b) for a in states1 for b in states2]
    off = np.zeros((len(joint), len(joint)))
    for (i, (a1, a2)), (j, (b1, b2)) in itertools.product(enumerate(joint), repeat=2):
        if a1 != b1 and a2 == b2:
            off[i, j] = rate_of("limb", a1, b1, a2)
        elif a2 != b2 and a1 == b1:
            off[i, j] = rate_of("visitor", a2, b2, a1)
    return q_from_rates(off)


def rates_by_label(model, rate_of, states1, states2):
    """The model's free-rate vector read back from labels of the form
    'trait: a->b' or 'trait: a->b | other=c' (the documented label format)."""
    out = []
    for label in model.labels:
        trait, rest = label.split(": ", 1)
        change, _, background = rest.partition(" | ")
        a, b = change.split("->")
        if background:
            c = background.split("=", 1)[1]
        else:  # the rate holds in every background: take the first
            c = (states2 if trait == "limb" else states1)[0]
        out.append(rate_of(trait, a, b, c))
    return np.array(out)


def brute_force_lnl(ref_tree, partials, Q, root):
    """ln L as the plain sum over interior joint states (Felsenstein 1981), P = expm(Q t)."""
    k = Q.shape[0]
    parent = [int(p) for p in ref_tree.parent]
    n_tips = ref_tree.n_tips
    root_node = parent.index(-1)
    interior = [v for v in range(len(parent)) if v >= n_tips and v != root_node]
    P = {v: scipy.linalg.expm(Q * ref_tree.length[v]) for v in range(len(parent)) if v != root_node}
    L = np.zeros(k)
    for r in range(k):
        for assignment in itertools.product(range(k), repeat=len(interior)):
            state = dict(zip(interior, assignment))
            state[root_node] = r
            w = 1.0
            for v in range(len(parent)):
                if v == root_node:
                    continue
                a = state[parent[v]]
                w *= (P[v][a] @ partials[v]) if v < n_tips else P[v][a, state[v]]
            L[r] += w
    if root == "uniform":
        total = L.mean()
    elif root == "data_weighted":
        total = (L * L).sum() / L.sum()
    else:  # stationary: pi Q = 0, sum pi = 1 (fact of the trade), solved here by SVD null space
        pi = scipy.linalg.null_space(Q.T)[:, 0]
        total = (pi / pi.sum()) @ L
    return math.log(total)


def partials_for(trait, tip_labels):
    """Tip partials built here from the Trait's possible-state table."""
    row = {t: i for i, t in enumerate(trait.taxa)}
    return np.array([trait.possible[row[t]] for t in tip_labels], dtype=float)


# hypotheses written out as rate functions: (trait, a, b, background) -> rate
def random_rate_function(rng, hypothesis, states1=LIMB, states2=VISITOR):
    table = {}
    for trait, own, other in (("limb", states1, states2), ("visitor", states2, states1)):
        varies = (
            hypothesis == "dependent"
            or (hypothesis == "first_depends_on_second" and trait == "limb")
            or (hypothesis == "second_depends_on_first" and trait == "visitor")
        )
        for a, b in itertools.permutations(own, 2):
            common = float(rng.uniform(0.1, 2.5))
            for c in other:
                table[(trait, a, b, c)] = float(rng.uniform(0.1, 2.5)) if varies else common
    return lambda trait, a, b, c: table[(trait, a, b, c)]


# --------------------------------------------------------------------------- structure


@pytest.mark.parametrize(
    "hypothesis, expected",
    [
        ("independent", 4),
        ("dependent", 8),
        ("first_depends_on_second", 6),
        ("second_depends_on_first", 6),
    ],
)
def test_binary_parameter_counts(hypothesis, expected):
    """4 / 8 / 6 / 6 free rates for two binary traits (Pagel 1994, published source)."""
    pair = make_pair(np.random.default_rng(1), ["a", "b", "c"])
    model = pairs.hypothesis_model(pair, hypothesis)
    assert model.n_params == expected
    assert model.states == ("absent+bee", "absent+moth", "present+bee", "present+moth")


@pytest.mark.parametrize(
    "hypothesis, expected",
    [
        # 3-state limb colour x 2-state visitor: each trait unconstrained within a background
        # (k1(k1-1) = 6 and k2(k2-1) = 2 rates), times the number of backgrounds where they vary
        ("independent", 6 + 2),
        ("dependent", 6 * 2 + 2 * 3),
        ("first_depends_on_second", 6 * 2 + 2),
        ("second_depends_on_first", 6 + 2 * 3),
    ],
)
def test_multistate_parameter_counts(hypothesis, expected):
    """Counting from the definitions (fact of the trade: unconstrained on k states has k(k-1) rates)."""
    pair = make_pair(np.random.default_rng(2), ["a", "b", "c"], COLOUR, VISITOR)
    assert pairs.hypothesis_model(pair, hypothesis).n_params == expected


@pytest.mark.parametrize("hypothesis", pairs.HYPOTHESES)
@pytest.mark.parametrize("states1", [LIMB, COLOUR])
def test_joint_q_matches_definition_and_forbids_double_changes(hypothesis, states1):
    """The engine's joint Q equals the one written out here from the definition, and every
    change of both traits at once has rate 0 (Pagel 1994, published source)."""
    rng = np.random.default_rng(len(states1) + len(hypothesis))
    pair = make_pair(rng, ["a", "b"], states1, VISITOR)
    model = pairs.hypothesis_model(pair, hypothesis)
    rate_of = random_rate_function(rng, hypothesis, states1, VISITOR)
    q = model.q_matrix(rates_by_label(model, rate_of, states1, VISITOR))
    np.testing.assert_allclose(q, expected_joint_q(states1, VISITOR, rate_of), rtol=0, atol=1e-15)
    for i, j in itertools.product(range(model.k), repeat=2):
        (a1, a2), (b1, b2) = pair.split(i), pair.split(j)
        if a1 != b1 and a2 != b2:
            assert model.rate_index[i, j] == -1 and q[i, j] == 0.0


def test_joint_tip_data_is_outer_product_of_possible_sets():
    """A taxon may be in (a, b) exactly when it may be in a and in b: missing or ambiguous
    values in either trait open every matching joint state (fact of the trade)."""
    first = trait_from_mapping(
        "colour", {"x": "pink", "y": "?", "z": "white|violet", "w": "pink"}, states=list(COLOUR)
    )
    second = trait_from_mapping(
        "visitor", {"x": "bee", "y": "moth", "z": "?", "v": "bee"}, states=list(VISITOR)
    )
    pair = pairs.make_pair("colour_visitor", first, second)
    joint = pair.joint_trait()
    assert joint.taxa == ("x", "y", "z", "w", "v")
    possible = {
        t: {s for s, ok in zip(joint.states, row) if ok}
        for t, row in zip(joint.taxa, joint.possible)
    }
    assert possible["x"] == {"pink+bee"}
    assert possible["y"] == {"white+moth", "pink+moth", "violet+moth"}
    assert possible["z"] == {"white+bee", "white+moth", "violet+bee", "violet+moth"}
    assert possible["w"] == {"pink+bee", "pink+moth"}  # not in the second table: missing
    assert possible["v"] == {"white+bee", "pink+bee", "violet+bee"}


def test_joint_state_limit():
    """At most 12 joint states; a larger pair is refused with an InputError naming it."""
    four = ("a", "b", "c", "d")
    six = tuple("uvwxyz")
    t4 = trait_from_mapping("shape", {"s1": "a", "s2": "d"}, states=list(four))
    t4b = trait_from_mapping("tone", {"s1": "b", "s2": "c"}, states=list(four))
    t3 = trait_from_mapping("colour", {"s1": "white", "s2": "pink"}, states=list(COLOUR))
    t2 = trait_from_mapping("visitor", {"s1": "bee", "s2": "moth"}, states=list(VISITOR))
    t6 = trait_from_mapping("scent", {"s1": "u", "s2": "z"}, states=list(six))
    assert pairs.make_pair("ok12", t4, t3).k1 * 3 == 12
    assert len(pairs.make_pair("ok12b", t6, t2).states) == 12
    with pytest.raises(InputError, match=r"trait pair 'too_big'.*16 joint states.*at most 12"):
        pairs.make_pair("too_big", t4, t4b)
    with pytest.raises(InputError, match=r"'shape' \(4 states\) and 'scent' \(6 states\)"):
        pairs.make_pair("too_big", t4, t6)


def test_state_label_with_joint_separator_is_refused():
    plus = trait_from_mapping("colour", {"s1": "pink+white", "s2": "pink"})
    t2 = trait_from_mapping("visitor", {"s1": "bee", "s2": "moth"})
    with pytest.raises(InputError, match=r"trait 'colour' has state 'pink\+white'"):
        pairs.make_pair("p", plus, t2)


# --------------------------------------------------------------------------- custom hypotheses

CONTINGENT = {
    # the limb must appear before the visitor can switch to moths, and moths only leave
    # while the limb is present; the limb is never lost while moths visit
    "absent+bee <-> present+bee": "limb_turnover",
    "present + bee -> present + moth": "to_moth",
    "present+moth -> present+bee": "to_bee",
    "absent+moth -> absent+bee": 0.5,
}


def test_custom_contingent_hypothesis_structure():
    pair = make_pair(np.random.default_rng(3), ["a", "b"])
    model = pairs.custom_hypothesis(pair, "limb_first", CONTINGENT)
    assert model.n_params == 3
    assert set(model.labels) == {"limb_turnover", "to_moth", "to_bee"}
    q = model.q_matrix([1.0, 2.0, 3.0])
    s = {name: i for i, name in enumerate(model.states)}
    assert q[s["absent+bee"], s["present+bee"]] == q[s["present+bee"], s["absent+bee"]] == 1.0
    assert q[s["present+bee"], s["present+moth"]] == 2.0
    assert q[s["present+moth"], s["present+bee"]] == 3.0
    assert q[s["absent+moth"], s["absent+bee"]] == 0.5
    # contingency: the visitor never switches to moths while the limb is absent,
    # and nothing else is allowed
    assert q[s["absent+bee"], s["absent+moth"]] == 0.0
    assert q[s["present+moth"], s["absent+moth"]] == 0.0
    assert q[s["absent+moth"], s["present+moth"]] == 0.0
    assert np.count_nonzero(q - np.diag(np.diag(q))) == 5
    # nested in 'dependent' on the boundary (it forbids rates 'dependent' leaves free)
    dep = pairs.hypothesis_model(pair, "dependent")
    n = pairs.nesting(model, dep)
    assert n is not None and n.df == 5 and n.boundary
    # but not nested in 'independent' (which ties the visitor's change across limb states)
    assert pairs.nesting(model, pairs.hypothesis_model(pair, "independent")) is None


def test_custom_double_change_refused_with_a_clear_message():
    pair = make_pair(np.random.default_rng(4), ["a", "b"])
    with pytest.raises(
        InputError,
        match=r"hypothesis 'jump'.*'absent\+bee -> present\+moth' "
        r"changes both traits at once.*two steps",
    ):
        pairs.custom_hypothesis(pair, "jump", {"absent+bee -> present+moth": "jump"})
    with pytest.raises(InputError, match=r"names state 'absent\+wasp'"):
        pairs.custom_hypothesis(pair, "bad", {"absent+bee -> absent+wasp": "x"})
    with pytest.raises(InputError, match="built-in hypothesis"):
        pairs.custom_hypothesis(pair, "dependent", {"absent+bee -> present+bee": "x"})


# --------------------------------------------------------------------------- nesting


def test_builtin_nesting_and_degrees_of_freedom():
    """independent in each one-way dependence in dependent, df from the parameter counts
    (Pagel 1994: independent vs dependent on 4 df, published source)."""
    pair = make_pair(np.random.default_rng(5), ["a", "b"])
    models = [pairs.hypothesis_model(pair, h) for h in pairs.HYPOTHESES]
    found = {(n.null, n.alternative): (n.df, n.boundary) for n in pairs.nested_tests(models)}
    assert found == {
        ("independent", "dependent"): (4, False),
        ("independent", "first_depends_on_second"): (2, False),
        ("independent", "second_depends_on_first"): (2, False),
        ("first_depends_on_second", "dependent"): (2, False),
        ("second_depends_on_first", "dependent"): (2, False),
    }


def test_embedded_rates_reproduce_the_null_q():
    """Every null rate matrix is an alternative rate matrix (that is what nesting means)."""
    rng = np.random.default_rng(6)
    pair = make_pair(rng, ["a", "b"], COLOUR, VISITOR)
    models = {h: pairs.hypothesis_model(pair, h) for h in pairs.HYPOTHESES}
    for n in pairs.nested_tests(list(models.values())):
        null, alt = models[n.null], models[n.alternative]
        q_null = null.q_matrix(rng.uniform(0.1, 2.0, null.n_params))
        # read alt's free rates off the null's Q, transition by transition
        alt_rates = np.zeros(alt.n_params)
        for i, j in zip(*np.nonzero(alt.rate_index >= 0)):
            alt_rates[alt.rate_index[i, j]] = q_null[i, j]
        np.testing.assert_array_equal(alt.q_matrix(alt_rates), q_null)


# --------------------------------------------------------------------------- likelihood


@pytest.mark.parametrize("seed", range(8))
def test_joint_likelihood_equals_brute_force(seed):
    """Engine ln L of every hypothesis == brute-force sum over interior joint states with a Q
    written out here (Felsenstein 1981; Pagel 1994; scipy.linalg.expm), ambiguous and missing
    tips included, every root treatment."""
    rng = np.random.default_rng(100 + seed)
    states1 = COLOUR if seed % 2 else LIMB
    newick = random_newick(rng, int(rng.integers(3, 5 if states1 == COLOUR else 6)))
    tree = parse_newick(newick)
    ref_tree = ref_tree_from_newick(newick)
    pair = make_pair(rng, tree.tip_labels, states1, VISITOR)
    joint = pair.joint_trait()
    for hypothesis in pairs.HYPOTHESES:
        rate_of = random_rate_function(rng, hypothesis, states1, VISITOR)
        model = pairs.hypothesis_model(pair, hypothesis)
        q_engine = model.q_matrix(rates_by_label(model, rate_of, states1, VISITOR))
        q_here = expected_joint_q(states1, VISITOR, rate_of)
        for root in ROOTS:
            got = log_likelihood(tree, joint.tip_partials(tree), q_engine, root=root)
            want = brute_force_lnl(ref_tree, partials_for(joint, ref_tree.tip_labels), q_here, root)
            assert abs(got - want) < 1e-9, (seed, hypothesis, root, got, want)


def test_kronecker_sum_exponential():
    """exp((Q1 (+) Q2) t) = exp(Q1 t) (x) exp(Q2 t) (handbook identity, from memory; scipy expm):
    the independent hypothesis's Q is the Kronecker sum of the two traits' Q."""
    rng = np.random.default_rng(7)
    pair = make_pair(rng, ["a"], COLOUR, VISITOR)
    model = pairs.hypothesis_model(pair, "independent")
    rates = rng.uniform(0.1, 2.0, model.n_params)
    q = model.q_matrix(rates)
    q1 = build_model("unconstrained", COLOUR).q_matrix(rates[:6])
    q2 = build_model("unconstrained", VISITOR).q_matrix(rates[6:])
    np.testing.assert_allclose(q, np.kron(q1, np.eye(2)) + np.kron(np.eye(3), q2), atol=1e-15)
    for t in (0.1, 0.7, 3.0):
        np.testing.assert_allclose(
            scipy.linalg.expm(q * t),
            np.kron(scipy.linalg.expm(q1 * t), scipy.linalg.expm(q2 * t)),
            atol=1e-12,
        )


@pytest.mark.parametrize("root", ROOTS)
@pytest.mark.parametrize("states1", [LIMB, COLOUR])
def test_independent_is_sum_of_separate_fits(root, states1):
    """Under 'independent', P(t) is a Kronecker product and the tip data an outer product,
    so the conditional likelihoods at every node factor: L(i,j) = L1(i) L2(j). Hence
    ln L_joint(a, b, c, d) = ln L1(a, b) + ln L2(c, d) for a uniform root (1/(k1 k2) = 1/k1 * 1/k2),
    an stationary root (pi = pi1 (x) pi2) and a data-weighted root
    (sum_ij L1i^2 L2j^2 / sum_ij L1i L2j = (sum L1i^2 / sum L1i)(sum L2j^2 / sum L2j)).
    The joint surface is a sum of two surfaces in disjoint rates, so the maxima agree too.
    (Pagel 1994 for the model; FitzJohn et al. 2009 for the data-weighted root.)"""
    rng = np.random.default_rng(len(states1) * 10 + ROOTS.index(root))
    tree = parse_newick(yule_newick(rng, 60, height=1.0))
    first = trait_from_mapping("limb", simulated_cells(rng, tree, states1), states=list(states1))
    second = trait_from_mapping(
        "visitor", simulated_cells(rng, tree, VISITOR), states=list(VISITOR)
    )
    pair = pairs.make_pair("limb_visitor", first, second)
    joint = pair.joint_trait()
    ind = pairs.hypothesis_model(pair, "independent")
    m1 = build_model("unconstrained", states1)
    m2 = build_model("unconstrained", VISITOR)
    n1 = m1.n_params
    X, X1, X2 = (
        joint.tip_partials(tree),
        pair.first.tip_partials(tree),
        pair.second.tip_partials(tree),
    )
    for _ in range(5):
        r = rng.uniform(0.05, 4.0, ind.n_params)
        lhs = log_likelihood(tree, X, ind.q_matrix(r), root=root)
        rhs = log_likelihood(tree, X1, m1.q_matrix(r[:n1]), root=root) + log_likelihood(
            tree, X2, m2.q_matrix(r[n1:]), root=root
        )
        assert abs(lhs - rhs) < 1e-9
    fj = fit_model(tree, X, ind, root=root, n_starts=5, seed=1)
    f1 = fit_model(tree, X1, m1, root=root, n_starts=5, seed=2)
    f2 = fit_model(tree, X2, m2, root=root, n_starts=5, seed=3)
    assert fj.converged and f1.converged and f2.converged
    assert not (fj.at_upper or f1.at_upper or f2.at_upper)
    # optimiser tolerance: each fit stops within ~1e-6 of its maximum
    assert abs(fj.log_likelihood - (f1.log_likelihood + f2.log_likelihood)) < 1e-4


# Correlated evolution: 'absent+bee' and 'present+moth' are stable, a mismatched state is
# left quickly by either trait changing back into a matched one.
CORRELATED = {
    ("limb", "absent", "present", "bee"): 1.0,
    ("limb", "absent", "present", "moth"): 6.0,
    ("limb", "present", "absent", "bee"): 6.0,
    ("limb", "present", "absent", "moth"): 1.0,
    ("visitor", "bee", "moth", "absent"): 1.0,
    ("visitor", "bee", "moth", "present"): 6.0,
    ("visitor", "moth", "bee", "absent"): 6.0,
    ("visitor", "moth", "bee", "present"): 1.0,
}


def test_lrt_on_dependent_data():
    """2 (ln L_dep - ln L_ind) >= 0 and compared with chi-square on 4 df (Pagel 1994);
    the chi-square upper 5 % point on 4 df is 9.488 (handbook table, Abramowitz & Stegun
    1964 Table 26.8; scipy.stats.chi2 general-purpose library)."""
    assert abs(chi2.ppf(0.95, 4) - 9.488) < 5e-4
    rng = np.random.default_rng(8)
    tree = parse_newick(yule_newick(rng, 120, height=1.0))
    pair = make_pair(rng, tree.tip_labels)
    dep = pairs.hypothesis_model(pair, "dependent")
    ind = pairs.hypothesis_model(pair, "independent")
    q = dep.q_matrix(rates_by_label(dep, lambda *k: CORRELATED[k], LIMB, VISITOR))
    states = simulate_states(tree, q, np.random.default_rng(9))
    X = pairs.simulate_pair_partials(pair, tree, states, (np.zeros(tree.n_tips, bool),) * 2)
    stat, fit_null, fit_alt = pairs.lr_statistic(tree, X, ind, dep, n_starts=4, seed=1)
    assert stat == pytest.approx(2 * (fit_alt.log_likelihood - fit_null.log_likelihood))
    assert stat > chi2.ppf(0.95, 4)


# --------------------------------------------------------------------------- bootstrap


def test_bootstrap_p_value_formula():
    """(1 + #{T* >= T}) / (N + 1) (common practice; Davison & Hinkley 1997, from memory)."""
    assert pairs.bootstrap_p_value(3.0, [1.0, 3.0, 5.0, 0.5]) == pytest.approx(3 / 5)
    assert pairs.bootstrap_p_value(9.0, [1.0, 3.0, 5.0, 0.5]) == pytest.approx(1 / 5)


def test_simulated_data_keep_the_missing_pattern():
    rng = np.random.default_rng(10)
    tree = parse_newick(random_newick(rng, 12))
    cells1 = random_cells(rng, tree.tip_labels, LIMB, p_missing=0.3)
    cells2 = random_cells(rng, tree.tip_labels, VISITOR, p_missing=0.3)
    cells1[tree.tip_labels[0]] = cells2[tree.tip_labels[1]] = "?"
    pair = pairs.make_pair(
        "limb_visitor",
        trait_from_mapping("limb", cells1, list(LIMB)),
        trait_from_mapping("visitor", cells2, list(VISITOR)),
    )
    m1, m2 = pair.missing_masks(tree)
    np.testing.assert_array_equal(m1, [cells1[t] == "?" for t in tree.tip_labels])
    np.testing.assert_array_equal(m2, [cells2[t] == "?" for t in tree.tip_labels])
    model = pairs.hypothesis_model(pair, "dependent")
    states = simulate_states(tree, model.q_matrix(np.ones(8)), rng)
    X = pairs.simulate_pair_partials(pair, tree, states, (m1, m2)).reshape(tree.n_tips, 2, 2)
    first_open = X.any(axis=2).sum(axis=1)  # how many limb states each tip allows
    second_open = X.any(axis=1).sum(axis=1)
    np.testing.assert_array_equal(first_open, np.where(m1, 2, 1))
    np.testing.assert_array_equal(second_open, np.where(m2, 2, 1))
    observed = ~m1 & ~m2
    i, j = np.divmod(states[: tree.n_tips], 2)
    assert (X[observed, i[observed], j[observed]] == 1).all()


def test_bootstrap_is_deterministic_whatever_the_order():
    """Replicate r's statistic depends only on (seed, tree, pair, test, r): the same seed
    gives the same values and p-value however the replicates are split or ordered."""
    rng = np.random.default_rng(11)
    tree = parse_newick(yule_newick(rng, 14, height=1.0))
    pair = make_pair(rng, tree.tip_labels)
    ind = pairs.hypothesis_model(pair, "independent")
    dep = pairs.hypothesis_model(pair, "dependent")
    null_rates = np.array([0.8, 1.2, 0.6, 0.9])
    kw = dict(root="data_weighted", seed=42, n_starts=2)
    whole = pairs.bootstrap_statistics(pair, tree, ind, dep, null_rates, replicates=range(6), **kw)
    later = pairs.bootstrap_statistics(pair, tree, ind, dep, null_rates, replicates=[5, 4, 3], **kw)
    early = pairs.bootstrap_statistics(pair, tree, ind, dep, null_rates, replicates=[0, 1, 2], **kw)
    np.testing.assert_array_equal(whole, np.concatenate([early, later[::-1]]))
    assert (whole >= 0).all() and len(set(whole.round(8))) > 1
    assert pairs.bootstrap_p_value(1.0, whole) == pairs.bootstrap_p_value(
        1.0, np.concatenate([later, early])
    )
    other = pairs.bootstrap_statistics(
        pair,
        tree,
        ind,
        dep,
        null_rates,
        replicates=range(6),
        root="data_weighted",
        seed=43,
        n_starts=2,
    )
    assert not np.array_equal(other, whole)


def test_bootstrap_simulates_boundary_rates_from_their_interval_edge():
    """A null rate fitted at the lower bound is simulated from the edge of its 95% interval:
    the value where ln L, the other rates held, is chi2(0.95, 1 df) / 2 below the maximum
    (scipy.stats.chi2, general-purpose library). A rate estimated well inside is kept."""
    rng = np.random.default_rng(5)
    tree = parse_newick(yule_newick(rng, 40, height=1.0))
    # the first trait never changes back to 'absent' in these data: a clade of 'present'
    limb = trait_from_mapping(
        "limb", {t: ("absent", "present")[i >= 30] for i, t in enumerate(tree.tip_labels)}
    )
    visitor = trait_from_mapping(
        "visitor", {t: ("bee", "moth")[int(rng.integers(2))] for t in tree.tip_labels}
    )
    pair = pairs.make_pair("lv", limb, visitor)
    ind = pairs.hypothesis_model(pair, "independent")
    X = pair.joint_trait().tip_partials(tree)
    fit = fit_model(tree, X, ind, n_starts=3, seed=2)
    new, moved = pairs.simulation_rates(tree, X, ind, fit.rates)
    assert set(fit.at_lower) <= set(moved) and fit.at_lower
    f = LogLikelihood(tree, X, ind)
    drop = chi2.ppf(0.95, 1) / 2
    for i, label in enumerate(ind.labels):
        if label in moved:
            trial = fit.rates.copy()
            trial[i] = new[i]
            assert new[i] > fit.rates[i]
            assert f(trial) == pytest.approx(fit.log_likelihood - drop, abs=1e-4)
        else:
            assert new[i] == fit.rates[i]
            trial = fit.rates.copy()
            trial[i] = 1e-6 / tree.height  # at the lower bound: clearly worse
            assert f(trial) < fit.log_likelihood - drop
    assert len(moved) < len(ind.labels)


# --------------------------------------------------------------------------- configuration


def test_pair_analysis_from_config_spec():
    rng = np.random.default_rng(12)
    pair = make_pair(rng, ["a", "b", "c"])
    traits = {"limb": pair.first, "visitor": pair.second}
    spec = {
        "traits": ["limb", "visitor"],
        "hypotheses": ["independent", "dependent", "limb_first"],
        "custom": {"limb_first": {"transitions": CONTINGENT}},
        "root": "stationary",
    }
    trait, models = pairs.pair_analysis("limb_visitor", spec, traits)
    assert trait.states == pair.states and trait.name == "limb_visitor"
    assert set(models) == {"independent", "dependent", "limb_first"}
    assert all(root == "stationary" for _, root in models.values())
    tests = {(n.null, n.alternative) for n in pairs.pair_tests(models)}
    assert tests == {("independent", "dependent"), ("limb_first", "dependent")}

    with pytest.raises(InputError, match=r"pairs.limb_visitor.hypotheses: 'linked'"):
        pairs.pair_analysis("limb_visitor", {**spec, "hypotheses": ["linked"]}, traits)
    with pytest.raises(InputError, match=r"pairs.limb_visitor.traits: trait 'petal'"):
        pairs.pair_analysis("limb_visitor", {**spec, "traits": ["limb", "petal"]}, traits)
    with pytest.raises(InputError, match=r"pairs.limb_visitor.root is 'present'"):
        pairs.pair_analysis("limb_visitor", {**spec, "root": "present"}, traits)


# --------------------------------------------------------------------------- calibration (small)


def test_small_calibration_of_both_tests():
    """A small version of benchmarks/pair_calibration.py. Under independent evolution the
    chi-square LRT (4 df, Pagel 1994) and the parametric bootstrap (Goldman 1993; 19 data
    sets, so p <= 0.05 only when the observed statistic beats all of them) reject about 5 %
    of the time; under a strong dependence far more often. Checked with exact binomial
    tails (scipy.stats.binom, general-purpose library)."""
    rng = np.random.default_rng(13)
    tree = parse_newick(yule_newick(rng, 60, height=1.0))
    pair = make_pair(rng, tree.tip_labels)
    ind = pairs.hypothesis_model(pair, "independent")
    dep = pairs.hypothesis_model(pair, "dependent")
    none = (np.zeros(tree.n_tips, bool),) * 2
    q_null = ind.q_matrix([1.5, 1.5, 1.0, 1.0])
    q_dep = dep.q_matrix(rates_by_label(dep, lambda *k: CORRELATED[k], LIMB, VISITOR))

    def rejections(q, seed0, n, n_boot):
        chi, boot = 0, 0
        for r in range(n):
            states = simulate_states(tree, q, np.random.default_rng(seed0 + r))
            X = pairs.simulate_pair_partials(pair, tree, states, none)
            stat, fit_null, _ = pairs.lr_statistic(tree, X, ind, dep, n_starts=3, seed=r)
            chi += stat > chi2.ppf(0.95, 4)
            if r < n_boot:
                sims = pairs.bootstrap_statistics(
                    pair,
                    tree,
                    ind,
                    dep,
                    fit_null.rates,
                    replicates=range(19),
                    seed=seed0 + r,
                    n_starts=3,
                )
                boot += pairs.bootstrap_p_value(stat, sims) <= 0.05
        return chi, boot

    n, n_boot = 40, 12
    chi_null, boot_null = rejections(q_null, 1000, n, n_boot)
    # P(X >= count) under Binomial(n, 0.05) must not be tiny
    assert binom.sf(chi_null - 1, n, 0.05) > 0.001, chi_null
    assert binom.sf(boot_null - 1, n_boot, 0.05) > 0.001, boot_null
    chi_dep, boot_dep = rejections(q_dep, 5000, n, n_boot)
    # more rejections than a 5 % test could plausibly give
    assert binom.sf(chi_dep - 1, n, 0.05) < 0.001, chi_dep
    assert binom.sf(boot_dep - 1, n_boot, 0.05) < 0.001, boot_dep
