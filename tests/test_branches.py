"""Branch-length treatments (mkforest.engine.branches) against outside references.

- reference: the engine's ln L on its transformed tree equals plain pruning
  (tests/reference.py: one scipy.linalg.expm per branch, Felsenstein 1981) on a
  copy of the tree transformed node by node with DendroPy in
  reference.transformed_newick (published formulas: Pagel 1994 for kappa, Pagel
  1999 for lambda and delta, Harmon et al. 2010 for the early burst, whose
  effective length is taken there by numerical integration with scipy.integrate.quad)
- identities: kappa = lambda = delta = 1 and a = 0 give the tree's own lengths
  exactly; kappa = 0 is unit lengths on a tree without zero-length branches;
  lambda = 0 on an ultrametric tree is the star tree (Pagel 1999) -- closed forms
- gradient of the branch parameter: central finite differences of ln L (general
  numerical fact: error O(h^2))
- nesting: the fit with an estimated treatment is at least as good as the fit
  on the given lengths (fact of the trade for nested models)
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from conftest import partials_from_cells, random_newick, tip_data_mapping, yule_newick
from reference import (
    pruning_log_likelihood,
    q_from_rates,
    ref_tree_from_newick,
    transformed_newick,
)

from mkforest.data.trees import parse_newick
from mkforest.engine.branches import (
    BOUNDS,
    ESTIMABLE,
    NULL_VALUE,
    Treatment,
    effective_lengths,
    parse_treatment,
    transformed_tree,
    tree_of_fit,
)
from mkforest.engine.fitting import fit_model
from mkforest.engine.gradient import log_likelihood_and_gradient
from mkforest.engine.likelihood import log_likelihood
from mkforest.engine.models import build_model
from mkforest.engine.treatment_search import TreatmentSpace
from mkforest.errors import InputError

TOL = 1e-9  # absolute, on ln L, as for the other reference tests
STATES = ["a", "b", "c"]
THETAS = {
    "kappa": [0.0, 0.4, 1.7],
    "lambda": [0.0, 0.35, 0.9],
    "delta": [0.3, 0.8, 2.5],
    "early_burst": [-4.0, -0.7, 1.5],
}


def case(seed, ultrametric):
    """(newick, Q, cells): a random tree (ultrametric Yule, or with polytomies and
    zero-length branches), a random 3-state rate matrix, tip data with missing and
    ambiguous cells simulated by the reference simulator."""
    rng = np.random.default_rng(500 + seed)
    n = int(rng.integers(5, 14))
    newick = (
        yule_newick(rng, n, height=float(rng.uniform(0.5, 3.0)))
        if ultrametric
        else random_newick(rng, n)
    )
    Q = q_from_rates(rng.uniform(0.1, 1.5, (3, 3)))
    cells = tip_data_mapping(rng, ref_tree_from_newick(newick), Q, STATES)
    return newick, Q, cells


def engine_lnl(newick, Q, cells, treatment, theta, root="uniform"):
    tree = parse_newick(newick)
    X = partials_from_cells(cells, tree.tip_labels, STATES)
    return log_likelihood(transformed_tree(tree, treatment, theta), X, Q, root, STATES)


def reference_lnl(newick, Q, cells, name, theta, root="uniform"):
    ref = ref_tree_from_newick(transformed_newick(newick, name, theta))
    X = partials_from_cells(cells, ref.tip_labels, STATES)
    return pruning_log_likelihood(ref, X, Q, root, STATES)


@pytest.mark.parametrize("ultrametric", [False, True])
@pytest.mark.parametrize("name", ESTIMABLE)
@pytest.mark.parametrize("seed", range(4))
def test_engine_matches_pruning_on_a_transformed_copy(name, seed, ultrametric):
    newick, Q, cells = case(seed, ultrametric)
    for theta in THETAS[name]:
        for root in ("uniform", "data_weighted", "b"):
            got = engine_lnl(newick, Q, cells, Treatment(name), theta, root)
            want = reference_lnl(newick, Q, cells, name, theta, root)
            assert got == pytest.approx(want, abs=TOL), (name, theta, root)


@pytest.mark.parametrize("ultrametric", [False, True])
def test_unit_and_fixed_values_match_pruning(ultrametric):
    for seed in range(3):
        newick, Q, cells = case(seed, ultrametric)
        got = engine_lnl(newick, Q, cells, parse_treatment("unit", "x"), None)
        assert got == pytest.approx(reference_lnl(newick, Q, cells, "unit", None), abs=TOL)
        fixed = parse_treatment({"delta": 0.5}, "x")
        assert not fixed.free and fixed.n_params == 0
        got = engine_lnl(newick, Q, cells, fixed, None)
        assert got == pytest.approx(reference_lnl(newick, Q, cells, "delta", 0.5), abs=TOL)


@pytest.mark.parametrize("ultrametric", [False, True])
def test_null_values_reproduce_the_given_lengths_exactly(ultrametric):
    for seed in range(4):
        newick, Q, cells = case(seed, ultrametric)
        tree = parse_newick(newick)
        given = engine_lnl(newick, Q, cells, Treatment(), None)
        for name, null in (("kappa", 1.0), ("lambda", 1.0), ("delta", 1.0), ("early_burst", 0.0)):
            x = Treatment(name).x_of(null, tree)  # the optimiser's value (ln delta for delta)
            assert x == NULL_VALUE[name]
            lengths = effective_lengths(tree, Treatment(name), x)[0]
            assert np.array_equal(lengths, tree.length), name
            assert engine_lnl(newick, Q, cells, Treatment(name), null) == given, name


def test_kappa_zero_is_unit_lengths_without_zero_length_branches():
    rng = np.random.default_rng(3)
    for _ in range(4):
        newick = random_newick(rng, 9, p_zero=0.0)
        Q = q_from_rates(rng.uniform(0.1, 1.5, (3, 3)))
        cells = tip_data_mapping(rng, ref_tree_from_newick(newick), Q, STATES)
        assert engine_lnl(newick, Q, cells, Treatment("kappa"), 0.0) == engine_lnl(
            newick, Q, cells, Treatment("unit"), None
        )


def test_lambda_zero_on_an_ultrametric_tree_is_the_star_tree():
    """Pagel (1999): lambda = 0 removes the shared history; every tip hangs from the root
    on a branch of the tree's height. The star tree is written here as Newick."""
    for seed in range(4):
        newick, Q, cells = case(seed, ultrametric=True)
        ref = ref_tree_from_newick(newick)
        depth = {}
        for v in range(ref.n_nodes):  # root-to-node distance by walking up
            d, u = 0.0, v
            while ref.parent[u] >= 0:
                d += ref.length[u]
                u = ref.parent[u]
            depth[v] = d
        height = max(depth[v] for v in range(ref.n_tips))
        star = "(" + ",".join(f"{label}:{float(height)!r}" for label in ref.tip_labels) + ");"
        star_tree = ref_tree_from_newick(star)
        want = pruning_log_likelihood(
            star_tree, partials_from_cells(cells, star_tree.tip_labels, STATES), Q
        )
        assert engine_lnl(newick, Q, cells, Treatment("lambda"), 0.0) == pytest.approx(
            want, abs=TOL
        )


# --------------------------------------------------------------------------- gradient


def _central(f, x, i, h=1e-5):
    up, down = x.copy(), x.copy()
    up[i] += h
    down[i] -= h
    return (f(up) - f(down)) / (2 * h)


@pytest.mark.parametrize("ultrametric", [False, True])
@pytest.mark.parametrize("name", ESTIMABLE)
def test_branch_parameter_gradient_matches_finite_differences(name, ultrametric):
    """The optimiser's gradient (rates scaled to the transformed tree's total length,
    the branch value in its own unit) against central differences of its ln L."""
    for seed in range(3):
        newick, Q, cells = case(seed, ultrametric)
        tree = parse_newick(newick)
        X = partials_from_cells(cells, tree.tip_labels, STATES)
        model = build_model("unconstrained", tuple(STATES))
        rng = np.random.default_rng(seed)
        for root in ("uniform", "data_weighted", "stationary"):
            space = TreatmentSpace(tree, X, model, root, Treatment(name))
            lo, hi = space.bounds
            x = np.append(
                np.log(rng.uniform(0.2, 1.5, model.n_params)),
                rng.uniform(lo + 0.1 * (hi - lo), hi - 0.1 * (hi - lo)),
            )
            neg, grad = space.objective(x)
            assert -neg == pytest.approx(space.value(x), abs=1e-9)
            for i in range(len(x)):
                fd = _central(space.value, x, i)
                assert -grad[i] == pytest.approx(fd, rel=1e-5, abs=1e-6), (name, root, i)
            # the coordinates map back onto the bounds and the rates the value uses
            assert space.branch_x(np.append(x[:-1], lo)) == BOUNDS[name][0]
            assert space.branch_x(np.append(x[:-1], hi)) == BOUNDS[name][1]
            assert space.branch_x(np.append(x[:-1], 0.0)) == NULL_VALUE[name]
            lengths = effective_lengths(tree, Treatment(name), space.branch_x(x))[0]
            assert log_likelihood(
                tree.with_lengths(lengths), X, model.q_matrix(space.rates(x)), root
            ) == pytest.approx(space.value(x), abs=1e-12)


def test_per_branch_gradient_matches_finite_differences():
    """d lnL / d t_b from the up pass against central differences on each branch."""
    rng = np.random.default_rng(9)
    tree = parse_newick(random_newick(rng, 12, p_zero=0.0))
    model = build_model("unconstrained", tuple(STATES))
    rates = rng.uniform(0.2, 1.5, model.n_params)
    X = np.zeros((tree.n_tips, 3))
    X[np.arange(tree.n_tips), rng.integers(0, 3, tree.n_tips)] = 1.0
    ll, _, dlen = log_likelihood_and_gradient(tree, X, model, rates, lengths_gradient=True)
    Q = model.q_matrix(rates)

    def f(lengths):
        return log_likelihood(tree.with_lengths(lengths), X, Q)

    for b in range(tree.n_nodes - 1):
        assert dlen[b] == pytest.approx(
            _central(f, tree.length.copy(), b, 1e-6), rel=1e-5, abs=1e-6
        )
    assert dlen[-1] == 0.0


# --------------------------------------------------------------------------- fitting


def test_estimated_treatment_nests_the_given_lengths():
    rng = np.random.default_rng(21)
    tree = parse_newick(yule_newick(rng, 30, height=2.0))
    model = build_model("symmetric", tuple(STATES))
    Q = q_from_rates(np.full((3, 3), 0.6))
    cells = tip_data_mapping(rng, ref_tree_from_newick(tree_newick(tree)), Q, STATES, 0.0, 0.0)
    X = partials_from_cells(cells, tree.tip_labels, STATES)
    given = fit_model(tree, X, model, n_starts=3, seed=1)
    for name in ESTIMABLE:
        res = fit_model(tree, X, model, n_starts=3, seed=1, branches=Treatment(name))
        assert res.n_params == given.n_params + 1
        assert res.branches == name
        assert res.log_likelihood >= given.log_likelihood - 1e-6, name
        lo, hi = BOUNDS[name]
        x = Treatment(name).x_of(res.branch_parameter, tree)
        assert lo <= x <= hi
        # ln L reported equals the engine's ln L on the tree of the fit (tree_of_fit)
        again = log_likelihood(tree_of_fit(tree, name, res.branch_parameter), X, res.q_matrix)
        assert again == pytest.approx(res.log_likelihood, abs=1e-9)
    fixed = fit_model(tree, X, model, n_starts=3, seed=1, branches=Treatment("kappa", 0.0))
    unit = fit_model(tree, X, model, n_starts=3, seed=1, branches=Treatment("unit"))
    assert fixed.n_params == given.n_params and fixed.branches == "kappa=0"
    assert fixed.log_likelihood == pytest.approx(unit.log_likelihood, abs=1e-6)


def tree_newick(tree):
    from mkforest.data.trees import to_newick

    return to_newick(tree, digits=17)


# --------------------------------------------------------------------------- config


@pytest.mark.parametrize(
    "spec, words",
    [
        ("kapa", "use one of as_given"),
        ({"lambda": 1.5}, "[0, 1]"),
        ({"unit": 1}, "has no parameter to fix"),
        ({"kappa": "big"}, "give a number"),
        ({"kappa": 1, "delta": 1}, "one fixed"),
    ],
)
def test_bad_treatment_names_the_key(spec, words):
    with pytest.raises(InputError) as err:
        parse_treatment(spec, "models.free.branches")
    assert "models.free.branches" in str(err.value) and words in str(err.value)


def test_zero_length_branches_stay_zero_under_unit_and_kappa():
    tree = parse_newick("((a:0,b:1):0,(c:2,d:0.5):1);")
    for t in (Treatment("unit"), Treatment("kappa", 0.0), Treatment("kappa", 2.0)):
        lengths = transformed_tree(tree, t).length
        assert np.all(lengths[tree.length == 0] == 0)
        assert np.all(lengths[:-1][tree.length[:-1] > 0] > 0)
    assert math.isclose(
        transformed_tree(tree, Treatment("kappa", 2.0)).length.sum(), 1 + 4 + 0.25 + 1
    )


# --------------------------------------------------------------------------- recovery (small)


def test_speciational_change_recovered_by_weights():
    """A binary trait simulated on unit branch lengths (0.3 changes per branch, equal rates)
    on 12 pure-birth trees of 100 tips: unit lengths should carry the largest AICc weight
    against the given lengths and an estimated kappa on most of them (measured: 11 of 12;
    benchmarks/branch_recovery.py runs 50 data sets of this and of an early burst)."""
    from conftest import yule_arrays

    from mkforest.engine.compare import akaike_weights, information_criteria
    from mkforest.engine.simulate import simulate_states, tip_partials_from_states

    model = build_model("equal", ("p", "q"))
    wins = 0
    for i in range(12):
        rng = np.random.default_rng([14, i])
        labels, parent, length = yule_arrays(rng, 100)
        tree = parse_newick(tree_newick_from(labels, parent, length))
        unit = transformed_tree(tree, Treatment("unit"))
        states = simulate_states(unit, model.q_matrix([0.3]), rng)
        X = tip_partials_from_states(states, tree.n_tips, 2)
        crit = [
            information_criteria(
                fit_model(tree, X, model, seed=i, branches=t).log_likelihood,
                1 + t.n_params,
                tree.n_tips,
            )["aicc"]
            for t in (Treatment(), Treatment("unit"), Treatment("kappa"))
        ]
        wins += int(np.argmax(akaike_weights(crit)) == 1)
    assert wins >= 8, wins


def tree_newick_from(labels, parent, length):
    from reference import newick_from_arrays

    return newick_from_arrays(labels, parent, length)


@pytest.mark.parametrize(
    "newick",
    [
        "(a:0.3,b:0.7);",
        "((a:0.2,b:0.2):0.5,c:0.7);",
        "((a:0,b:0.5):0,c:0.5);",
        "[&R] (a:1,b:1,c:1,d:1);",
    ],
)
def test_tiny_degenerate_and_star_trees_fit_under_every_treatment(newick):
    """Two or three tips, zero-length branches (a tip on its parent, a zero internal branch),
    a star: each fit ends with a finite ln L equal to the engine's on the fit's tree."""
    tree = parse_newick(newick)
    model = build_model("equal", ("p", "q"))
    X = np.zeros((tree.n_tips, 2))
    X[:, 0] = 1.0
    X[0] = [0.0, 1.0]
    for name in ("as_given", "unit", *ESTIMABLE):
        res = fit_model(tree, X, model, n_starts=2, seed=0, branches=Treatment(name))
        assert np.isfinite(res.log_likelihood), name
        again = log_likelihood(tree_of_fit(tree, name, res.branch_parameter), X, res.q_matrix)
        assert again == pytest.approx(res.log_likelihood, abs=1e-9), name


def test_branch_test_names_a_fit_below_the_given_lengths():
    """A treatment contains the given lengths, so a fit below them missed its maximum
    (fact of the trade: nested models): the per-tree row says so, its statistic is 0
    and the summary counts it; a fit at or above them gets no note."""
    import pandas as pd

    from mkforest.engine.branch_support import branch_tests

    rows = []
    for tree, (given, kappa) in enumerate([(-50.0, -48.0), (-50.0, -50.5), (-50.0, -50.001)]):
        rows += [
            {
                "tree_set": "s",
                "analysis": "a",
                "model": "plain",
                "structure": "equal",
                "branches": "as_given",
                "tree": tree,
                "log_likelihood": given,
                "branch_parameter": np.nan,
            },
            {
                "tree_set": "s",
                "analysis": "a",
                "model": "power",
                "structure": "equal | branches kappa",
                "branches": "kappa",
                "tree": tree,
                "log_likelihood": kappa,
                "branch_parameter": 0.5,
            },
        ]
    per_tree, summary = branch_tests(pd.DataFrame(rows))
    notes = dict(zip(per_tree["tree"], per_tree["note"]))
    assert notes[0] == "" and notes[2] == ""
    assert "0.5 log-units below the fit on the given lengths" in notes[1]
    assert per_tree.set_index("tree").at[1, "statistic"] == 0.0
    assert per_tree.set_index("tree").at[0, "statistic"] == pytest.approx(4.0)
    assert summary["n_below_null"].tolist() == [1]
    from mkforest.report.methods_branches import results_lines

    said = " ".join(results_lines("a", {"branch_test_summary": summary}))
    assert "On 1 of 3 trees the fit of power ended below that of plain" in said


@pytest.mark.parametrize("name", ESTIMABLE)
def test_one_call_objective_equals_the_step_by_step_one(name):
    """The compiled treatment objective (transform, rates, likelihood and chain rule in
    one call) gives the step-by-step path's ln L and gradient (Transform, Evaluator,
    NumPy chain rule) to rounding, at random points inside the box and on its
    bounds, for every root where the one-call path applies."""
    checked = 0
    for seed in range(4):
        for ultrametric in (False, True):
            newick, _, cells = case(seed, ultrametric)
            tree = parse_newick(newick)
            X = partials_from_cells(cells, tree.tip_labels, STATES)
            for kind in ("equal", "unconstrained"):
                model = build_model(kind, tuple(STATES))
                rng = np.random.default_rng(seed)
                for root in ("uniform", "data_weighted"):
                    one = TreatmentSpace(tree, X, model, root, Treatment(name))
                    steps = TreatmentSpace(tree, X, model, root, Treatment(name))
                    steps.evaluate.fused = False
                    lo, hi = one.bounds
                    for w in (lo, hi, 0.0, rng.uniform(lo, hi)):
                        z = np.append(np.log(rng.uniform(0.2, 1.5, model.n_params)), w)
                        status = one._one_call(z)[0]
                        f1, g1 = one.objective(z)
                        f2, g2 = steps.objective(z)
                        if status != 0:
                            continue
                        checked += 1
                        assert f1 == pytest.approx(f2, rel=1e-13, abs=1e-13)
                        np.testing.assert_allclose(g1, g2, rtol=1e-10, atol=1e-11)
                        assert one.value(z) == pytest.approx(-f2, rel=1e-13, abs=1e-13)
    assert checked >= 100  # the one-call path ran, not only the fallback


@pytest.mark.parametrize("seed", range(3))
def test_fits_on_odd_trees_are_sound_under_every_treatment(seed):
    """Trees of the shapes users bring (polytomies, zero-length tip and internal
    branches, branches of 1e-9, tips at different depths), 2 and 3 states, equal and
    unconstrained rates (rates that cycle reach the complex-eigenvalue path): every
    estimated treatment's fit reports a finite ln L that equals plain pruning
    (tests/reference.py: scipy expm per branch) on a copy of the tree transformed
    with DendroPy at the reported parameter and rates (reference.transformed_newick,
    independent of the engine's transform), and is not below the same model's fit
    on the given lengths (nested models: fact of the trade)."""
    rng = np.random.default_rng(900 + seed)
    newick = random_newick(rng, int(rng.integers(12, 25)), p_zero=0.2)
    # a few branches of 1e-9, as some dating programs write them
    parts = newick.split(":")
    for i in rng.choice(np.arange(1, len(parts)), size=3, replace=False):
        head, sep, tail = parts[i].partition(",") if "," in parts[i] else parts[i].partition(")")
        if head and head[0].isdigit() and float(head) > 0:
            parts[i] = "1e-09" + sep + tail
    newick = ":".join(parts)
    tree = parse_newick(newick)
    ref = ref_tree_from_newick(newick)
    checked = 0
    for states, kind in ((STATES[:2], "equal"), (STATES, "unconstrained")):
        model = build_model(kind, tuple(states))
        Q = q_from_rates(rng.uniform(0.2, 2.0, (len(states), len(states))))
        cells = tip_data_mapping(rng, ref, Q, list(states))
        X = partials_from_cells(cells, tree.tip_labels, list(states))
        given = fit_model(tree, X, model, seed=seed)
        assert np.isfinite(given.log_likelihood)
        for name in ESTIMABLE:
            res = fit_model(tree, X, model, seed=seed, branches=Treatment(name))
            assert np.isfinite(res.log_likelihood), name
            assert res.log_likelihood >= given.log_likelihood - 1e-6, (name, kind)
            theta = res.branch_parameter
            moved = ref_tree_from_newick(transformed_newick(newick, name, theta))
            want = pruning_log_likelihood(
                moved,
                partials_from_cells(cells, moved.tip_labels, list(states)),
                res.q_matrix,
                "uniform",
                list(states),
            )
            assert res.log_likelihood == pytest.approx(want, abs=1e-6), (name, kind, theta)
            checked += 1
    assert checked == 2 * len(ESTIMABLE)


@pytest.mark.parametrize("name", ESTIMABLE)
def test_rates_first_reaches_the_given_lengths_optimum_on_large_trees(name):
    """The null start fits the rates on the given lengths before the branch value
    moves; on large trees (|ln L| in the hundreds) it must get there in absolute
    terms: a tolerance relative to ln L stopped 12 log-units short on a 400-tip
    tree, and the joint descent then ended below the given lengths' fit. Here the
    rates-first point is within 0.05 of that fit's ln L (scipy's L-BFGS-B with its
    own numerical gradient gives the reference optimum of the one-rate model), and
    the treatment fit is not below it (nested models: fact of the trade)."""
    import scipy.optimize

    from mkforest.engine.fitting import start_sequence
    from mkforest.engine.simulate import simulate_states, tip_partials_from_states

    rng = np.random.default_rng(44)
    model = build_model("equal", ("p", "q"))
    for _ in range(3):
        tree = parse_newick(yule_newick(rng, 400, height=1.0))
        states = simulate_states(tree, model.q_matrix([40.0]), rng)  # fast: ln L in the hundreds
        X = tip_partials_from_states(states, tree.n_tips, 2)
        ref = scipy.optimize.minimize_scalar(
            lambda y, tree=tree, X=X: -log_likelihood(tree, X, model.q_matrix(np.exp([y]))),
            bounds=(-5.0, 8.0),
            method="bounded",
            options={"xatol": 1e-8},
        )
        best = -ref.fun
        assert best < -150.0
        space = TreatmentSpace(tree, X, model, "uniform", Treatment(name))
        starts, (lo, hi) = start_sequence(tree, X, model, seed=1)
        z = space.rates_first(np.append(next(starts), 0.0), [(lo, hi)])
        assert space.value(z) >= best - 0.05, (name, space.value(z), best)
        fit = fit_model(tree, X, model, seed=1, branches=Treatment(name))
        assert fit.log_likelihood >= best - 1e-6, name
