"""The engine's likelihood against outside references.

- brute-force sum over interior-node states (Felsenstein 1981, J. Mol. Evol.
  17:368 -- published source: the sum that pruning replaces), written in
  tests/reference.py without mkforest
- data-weighted root, ln L = ln(sum_i L_i^2 / sum_i L_i) (FitzJohn, Maddison &
  Otto 2009, Syst. Biol. 58:595 -- published source)
- stationary root: pi Q = 0, sum pi = 1 (fact of the trade), solved here by
  least squares
- Yang (2014) Molecular Evolution: A Statistical Approach, section 4.2, Fig. 4.2
  (published worked example; values recalled from memory, then reproduced by the
  independent brute force and pruning in tests/reference.py)
- bad input: InputError naming the file / taxon / label (issue 2)
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from conftest import (
    CUSTOM_SPECS,
    partials_from_cells,
    random_case,
    tip_data_mapping,
    yule_arrays,
)
from reference import (
    brute_force_log_likelihood,
    brute_force_root_likelihoods,
    combine_root,
    newick_from_arrays,
    pruning_log_likelihood,
    q_from_rates,
    reference_custom_q,
    reference_stationary,
    stationary_is_unique,
)

from mkforest.data.traits import trait_from_mapping
from mkforest.data.trees import parse_newick, read_trees
from mkforest.engine.likelihood import log_likelihood, stationary_distribution
from mkforest.engine.models import build_model
from mkforest.errors import InputError

N_CASES = 48
TOL = 1e-9  # absolute, on ln L


def roots_for(case):
    """Every root treatment: uniform, data_weighted, each fixed state, stationary."""
    return ["uniform", "data_weighted", *case["states"], "stationary"]


# --------------------------------------------------------------------------- reference self-check


@pytest.mark.parametrize("seed", range(0, N_CASES, 3))
def test_reference_brute_force_equals_reference_pruning(seed):
    """The two reference implementations agree with each other (Felsenstein 1981:
    pruning is an exact rearrangement of the brute-force sum -- published source)."""
    case = random_case(seed)
    tree = case["ref_tree"]
    partials = partials_from_cells(case["cells"], tree.tip_labels, case["states"])
    for root in roots_for(case):
        brute = (
            brute_force_log_likelihood(tree, partials, case["Q"], root, case["states"])
            if root != "stationary" or stationary_is_unique(case["Q"])
            else None
        )
        if brute is None:
            continue
        pruned = pruning_log_likelihood(tree, partials, case["Q"], root, case["states"])
        if math.isinf(brute):
            assert pruned == brute
        else:
            assert abs(pruned - brute) < 1e-11, (seed, root)


# --------------------------------------------------------------------------- models


@pytest.mark.parametrize("index", range(len(CUSTOM_SPECS)))
def test_custom_model_q_matrix_matches_transition_list(index):
    """build_model('custom') + q_matrix vs Q read plainly off the transition list
    (forbidden = 0, fixed = number, same label = same rate; rows sum to 0, fact of the trade)."""
    states, transitions = CUSTOM_SPECS[index]
    model = build_model("custom", states, transitions)
    rates = np.random.default_rng(index).uniform(0.1, 2.0, size=model.n_params)
    expected = reference_custom_q(states, transitions, dict(zip(model.labels, rates)))
    labels_used = {v for v in transitions.values() if isinstance(v, str)}
    assert set(model.labels) == labels_used
    np.testing.assert_allclose(model.q_matrix(rates), expected, rtol=0, atol=1e-15)


@pytest.mark.parametrize("k", [2, 3, 4, 5])
def test_builtin_model_structures(k):
    """equal: 1 rate; symmetric: k(k-1)/2 rates, Q_ij = Q_ji; unconstrained: k(k-1)
    rates, each off-diagonal its own (Lewis 2001 Mk model and its usual
    constrained forms -- fact of the trade)."""
    states = [f"s{i}" for i in range(k)]
    rng = np.random.default_rng(k)
    off = ~np.eye(k, dtype=bool)

    equal = build_model("equal", states)
    assert equal.n_params == 1
    q = equal.q_matrix([0.7])
    np.testing.assert_allclose(q, q_from_rates(np.full((k, k), 0.7)), atol=1e-15)

    symmetric_model = build_model("symmetric", states)
    assert symmetric_model.n_params == k * (k - 1) // 2
    rates = rng.uniform(0.1, 2.0, size=symmetric_model.n_params)
    q = symmetric_model.q_matrix(rates)
    np.testing.assert_allclose(q, q.T, atol=0)
    np.testing.assert_allclose(np.sort(q[np.triu_indices(k, 1)]), np.sort(rates), atol=0)
    np.testing.assert_allclose(q.sum(axis=1), 0.0, atol=1e-14)

    alld = build_model("unconstrained", states)
    assert alld.n_params == k * (k - 1)
    rates = rng.uniform(0.1, 2.0, size=alld.n_params)
    q = alld.q_matrix(rates)
    np.testing.assert_allclose(np.sort(q[off]), np.sort(rates), atol=0)
    np.testing.assert_allclose(q.sum(axis=1), 0.0, atol=1e-14)


# --------------------------------------------------------------------------- brute force


@pytest.mark.parametrize("seed", range(N_CASES))
def test_log_likelihood_equals_brute_force(seed):
    """Engine ln L == ln(brute-force sum) to 1e-9 for every root treatment
    (Felsenstein 1981; FitzJohn et al. 2009 for 'data_weighted' -- published sources)."""
    case = random_case(seed)
    tree = parse_newick(case["newick"])
    states, Q = case["states"], case["Q"]
    partials = partials_from_cells(case["cells"], tree.tip_labels, states)

    # brute force on the engine's arrays and on DendroPy's own parse: the per-root-state
    # likelihoods do not depend on node numbering, so they must agree (checks parse_newick).
    L = brute_force_root_likelihoods(tree, partials, Q)
    ref_tree = case["ref_tree"]
    L_ref = brute_force_root_likelihoods(
        ref_tree, partials_from_cells(case["cells"], ref_tree.tip_labels, states), Q
    )
    np.testing.assert_allclose(L, L_ref, rtol=1e-12, atol=0)

    failures = []
    for root in roots_for(case):
        # stationary root with several closed classes: the engine documents the minimum-norm
        # least-squares pi; the reference computes the same choice itself
        total = combine_root(L, root, Q, states, allow_nonunique=True)
        expected = math.log(total) if total > 0 else -math.inf
        got = log_likelihood(tree, partials, Q, root=root, states=tuple(states))
        ok = (got == expected) if math.isinf(expected) else abs(got - expected) <= TOL
        if not ok:
            failures.append(f"root={root!r}: engine {got!r}, brute force {expected!r}")
    assert not failures, (
        f"seed {seed}, kind {case['model'].kind}, Q=\n{Q}\n"
        f"tree {case['newick']}\ncells {case['cells']}\n" + "\n".join(failures)
    )


@pytest.mark.parametrize("tiny", [1e-10, 1e-7])
@pytest.mark.parametrize("seed", [2, 8, 15, 17, 27, 47, 6, 13])
def test_log_likelihood_equals_brute_force_short_branches(seed, tiny):
    """As test_log_likelihood_equals_brute_force, with every zero-length branch set to a
    tiny positive length (posterior trees often carry such branches): ln L stays within
    1e-9 of the brute force (Felsenstein 1981 -- published source) for every root."""
    case = random_case(seed)
    ref = case["ref_tree"]
    length = np.where((ref.length == 0) & (ref.parent >= 0), tiny, ref.length)
    assert (length != ref.length).any(), "case must have a zero-length branch"
    tree = parse_newick(newick_from_arrays(ref.tip_labels, ref.parent, length))
    states, Q = case["states"], case["Q"]
    partials = partials_from_cells(case["cells"], tree.tip_labels, states)
    L = brute_force_root_likelihoods(tree, partials, Q)
    failures = []
    for root in roots_for(case):
        total = combine_root(L, root, Q, states, allow_nonunique=True)
        expected = math.log(total) if total > 0 else -math.inf
        got = log_likelihood(tree, partials, Q, root=root, states=tuple(states))
        ok = (got == expected) if math.isinf(expected) else abs(got - expected) <= TOL
        if not ok:
            failures.append(f"root={root!r}: engine {got!r}, brute force {expected!r}")
    assert not failures, f"seed {seed}, tiny {tiny}\n" + "\n".join(failures)


def test_brute_force_cases_cover_what_they_claim():
    """The random cases really include polytomies, zero-length branches, missing and
    ambiguous tips, every model kind, and absorbing states (guards the generator)."""
    kinds, polytomy, zero, missing, ambiguous, absorbing = set(), False, False, False, False, False
    for seed in range(N_CASES):
        case = random_case(seed)
        tree = case["ref_tree"]
        counts = np.bincount(tree.parent[tree.parent >= 0])
        kinds.add(case["model"].kind)
        polytomy |= bool((counts > 2).any())
        zero |= bool((np.delete(tree.length, tree.root) == 0).any())
        missing |= "?" in case["cells"].values()
        ambiguous |= any("|" in c for c in case["cells"].values())
        absorbing |= bool((np.diag(case["Q"]) == 0).any())
    assert kinds == {"equal", "symmetric", "unconstrained", "custom"}
    assert polytomy and zero and missing and ambiguous and absorbing


@pytest.mark.parametrize("seed", range(0, N_CASES, 4))
def test_tip_partials_from_trait_match_cells(seed):
    """Trait.tip_partials codes '?' as all states and 'a|b' as both (fact of the trade)."""
    case = random_case(seed)
    tree = parse_newick(case["newick"])
    trait = trait_from_mapping("trait", case["cells"], states=case["states"])
    expected = partials_from_cells(case["cells"], tree.tip_labels, case["states"])
    np.testing.assert_array_equal(trait.tip_partials(tree), expected)


def test_impossible_data_give_minus_infinity():
    """Data impossible under the model have L = 0, ln L = -inf (brute force), not NaN."""
    # two tips joined by zero-length branches cannot differ
    tree = parse_newick("((a:0,b:0):0.3,c:0.5);")
    cells = {"a": "x", "b": "y", "c": "x"}
    states = ["x", "y"]
    partials = partials_from_cells(cells, tree.tip_labels, states)
    Q = q_from_rates(np.full((2, 2), 1.0))
    for root in ["uniform", "data_weighted", "stationary", "x", "y"]:
        assert brute_force_log_likelihood(tree, partials, Q, root, states) == -math.inf
        assert log_likelihood(tree, partials, Q, root=root, states=tuple(states)) == -math.inf, root

    # irreversible loss: a root fixed in the absorbing state cannot produce 'present' tips
    states = ["present", "absent"]
    Q = q_from_rates([[0, 0.5], [0, 0]])
    tree = parse_newick("((a:0.2,b:0.4):0.3,c:0.5);")
    partials = partials_from_cells(
        {"a": "present", "b": "absent", "c": "present"}, tree.tip_labels, states
    )
    assert brute_force_log_likelihood(tree, partials, Q, "absent", states) == -math.inf
    assert log_likelihood(tree, partials, Q, root="absent", states=tuple(states)) == -math.inf
    # while the other root treatments stay finite and match the brute force
    for root in ["uniform", "data_weighted", "present"]:
        expected = brute_force_log_likelihood(tree, partials, Q, root, states)
        assert (
            abs(log_likelihood(tree, partials, Q, root=root, states=tuple(states)) - expected)
            <= TOL
        )


# --------------------------------------------------------------------------- stationary distribution


@pytest.mark.parametrize("seed", range(N_CASES))
def test_stationary_distribution_solves_pi_q_zero(seed):
    """pi Q = 0, sum pi = 1, pi >= 0 (fact of the trade), and equal to the reference
    least-squares solution (unique when rank Q = k-1; otherwise the documented
    minimum-norm choice)."""
    case = random_case(seed)
    Q = case["Q"]
    pi = stationary_distribution(Q)
    np.testing.assert_allclose(pi @ Q, 0.0, atol=1e-12)
    assert abs(pi.sum() - 1) < 1e-12 and (pi >= 0).all()
    expected = reference_stationary(Q, allow_nonunique=True)
    np.testing.assert_allclose(pi, expected, atol=1e-12)


def test_stationary_two_state_closed_form():
    """pi_0 = b/(a+b) for rates a (0->1), b (1->0) -- standard textbook result, e.g.
    Harmon (2019) Phylogenetic Comparative Methods ch. 7 (from memory)."""
    for a, b in [(0.3, 1.7), (2.0, 0.5), (1e-3, 4.0)]:
        pi = stationary_distribution(q_from_rates([[0, a], [b, 0]]))
        np.testing.assert_allclose(pi, [b / (a + b), a / (a + b)], rtol=1e-12)


def test_stationary_absorbing_chain_is_the_absorbing_state():
    """Irreversible chain early -> mid -> late: the one closed class is {late}, so pi = (0, 0, 1)
    (fact of the trade)."""
    states, transitions = CUSTOM_SPECS[1]
    Q = reference_custom_q(states, transitions, {"step": 0.8})
    np.testing.assert_allclose(stationary_distribution(Q), [0, 0, 1], atol=1e-12)


# --------------------------------------------------------------------------- published example


def test_yang_2014_k80_five_tip_example():
    """Yang (2014) Molecular Evolution: A Statistical Approach, section 4.2, Fig. 4.2
    (published worked example; values recalled from memory, then reproduced by the
    independent brute force and pruning in tests/reference.py):
    K80 with kappa = 2, tips 1..5 = T C A C C, equal base frequencies,
    L = 0.000509843, ln L = -7.58141.

    K80 as a 4-state custom model on T, C, A, G: transitions (T<->C, A<->G) at kappa*beta,
    transversions at beta. Branch lengths are expected substitutions per site, so
    the rate out of every state is 1: kappa*beta + 2*beta = 1, beta = 1/(kappa + 2).
    """
    kappa = 2.0
    beta = 1.0 / (kappa + 2.0)
    s, v = kappa * beta, beta  # transition and transversion rates, fixed numbers
    states = ("T", "C", "A", "G")
    transitions = {
        "T -> C": s,
        "C -> T": s,
        "A -> G": s,
        "G -> A": s,
        "T -> A": v,
        "A -> T": v,
        "T -> G": v,
        "G -> T": v,
        "C -> A": v,
        "A -> C": v,
        "C -> G": v,
        "G -> C": v,
    }
    model = build_model("custom", states, transitions, name="k80")
    assert model.n_params == 0
    Q = model.q_matrix(np.array([]))
    np.testing.assert_allclose(-np.diag(Q), 1.0, atol=1e-15)  # mean rate 1
    tree = parse_newick("(((1:0.2,2:0.2):0.1,3:0.2):0.1,(4:0.2,5:0.2):0.1);")
    data = {"1": "T", "2": "C", "3": "A", "4": "C", "5": "C"}
    partials = trait_from_mapping("site", data, states=states).tip_partials(tree)
    for root in ("stationary", "uniform"):  # identical: equal frequencies
        lnl = log_likelihood(tree, partials, Q, root=root, states=states)
        assert abs(lnl - (-7.58141)) < 1e-5, (root, lnl)
        assert abs(math.exp(lnl) / 0.000509843 - 1) < 1e-6, (root, math.exp(lnl))
        # the published value has 6 significant digits; to 1e-9 relative we compare
        # with the independent brute force, which reproduces it
        ref = brute_force_log_likelihood(tree, partials, Q, root, list(states))
        assert abs(math.exp(lnl) / math.exp(ref) - 1) < 1e-9
        assert abs(math.exp(ref) - 0.000509843) < 5e-10


# --------------------------------------------------------------------------- underflow


@pytest.mark.parametrize("n_tips", [2_000, pytest.param(10_000, marks=pytest.mark.slow)])
def test_large_tree_finite_and_equal_to_log_space_reference(n_tips):
    """2,000 and 10,000 tips (the latter slow, ~13 s): L itself underflows a double
    (ln L < -745), yet the engine's ln L is finite and equals the reference pruning
    with per-node rescaling (Felsenstein 1981; rescaling is a fact of the trade) to
    1e-9 absolute (measured: ~2e-12 at 2,000 tips, ~1.2e-11 at 10,000)."""
    rng = np.random.default_rng(n_tips)
    labels, parent, length = yule_arrays(rng, n_tips, height=2.0)
    tree = parse_newick(newick_from_arrays(labels, parent, length))
    Q = q_from_rates([[0, 1.5, 0.4], [0.8, 0, 0.9], [0.3, 1.1, 0]])
    states = ["x", "y", "z"]
    cells = tip_data_mapping(rng, tree, Q, states, p_missing=0.05, p_ambiguous=0.05)
    partials = partials_from_cells(cells, tree.tip_labels, states)
    for root in ("uniform", "data_weighted", "stationary", "y"):
        expected = pruning_log_likelihood(tree, partials, Q, root, states)
        assert expected < -745  # exp(ln L) would be 0 in double precision
        got = log_likelihood(tree, partials, Q, root=root, states=tuple(states))
        assert np.isfinite(got)
        assert abs(got - expected) <= TOL, (root, got, expected)


# --------------------------------------------------------------------------- bad input (issue 2)


def _write(tmp_path, name, text):
    path = tmp_path / name
    path.write_text(text)
    return path


def _raises_input_error(path, *needles):
    with pytest.raises(InputError) as info:
        read_trees(path)
    message = str(info.value)
    for needle in (path.name, *needles):
        assert needle in message, f"{needle!r} not in message: {message}"
    return message


def test_malformed_tree_file_names_the_file(tmp_path):
    path = _write(tmp_path, "broken.nwk", "((a:1,b:1):1,c:1;\n")
    _raises_input_error(path)


def test_missing_branch_length_names_file_and_taxon(tmp_path):
    path = _write(tmp_path, "nolength.nwk", "((a:1,b):1,c:1);\n")
    _raises_input_error(path, "b")


def test_negative_branch_length_names_file_and_taxon(tmp_path):
    path = _write(tmp_path, "negative.nwk", "((a:1,bee:-0.5):1,c:1);\n")
    _raises_input_error(path, "bee")


def test_duplicate_tip_names_file_and_taxon(tmp_path):
    path = _write(tmp_path, "dupe.nwk", "((alpha:1,alpha:1):1,c:1);\n")
    _raises_input_error(path, "alpha")


def test_duplicate_tip_in_second_tree_names_the_tree(tmp_path):
    path = _write(tmp_path, "two.nwk", "((a:1,b:1):1,c:1);\n((a:1,a:1):1,c:1);\n")
    message = _raises_input_error(path, "a")
    assert "tree 2" in message or "line 2" in message, message


@pytest.mark.parametrize("prefix", ["[&U] ", ""])
def test_unrooted_basal_trifurcation_says_how_to_root(tmp_path, prefix):
    """A basal trifurcation is how unrooted trees are written (with or without [&U]):
    the error names the file and says how to root the tree."""
    path = _write(tmp_path, "unrooted.nwk", prefix + "(a:0.1,b:0.2,(c:0.1,d:0.1):0.05);\n")
    message = _raises_input_error(path)
    assert "root" in message.lower() and ("outgroup" in message or "midpoint" in message)


def test_custom_model_names_state_the_trait_lacks():
    trait = trait_from_mapping("habitat", {"a": "land", "b": "water", "c": "land"})
    with pytest.raises(InputError) as info:
        build_model(
            "custom", trait.states, {"land -> air": "fly", "land <-> water": "swim"}, name="flight"
        )
    assert "air" in str(info.value) and "flight" in str(info.value)


def test_trait_with_one_state_is_rejected(tmp_path):
    from mkforest.data.traits import check_variable, read_traits

    path = _write(tmp_path, "traits.csv", "taxon,colour,size\na,red,big\nb,red,small\nc,?,big\n")
    traits = read_traits(path, "taxon")
    with pytest.raises(InputError) as info:
        check_variable(traits["colour"])
    assert "colour" in str(info.value)
    check_variable(traits["size"])  # two states: fine
    with pytest.raises(InputError) as info:
        build_model("equal", traits["colour"].states, name="one_state")
    assert "one_state" in str(info.value)
