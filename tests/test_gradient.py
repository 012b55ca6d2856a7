"""The exact gradient of ln L (mkforest.engine.gradient) against outside references.

Sources, beside each check:
- central finite differences with Richardson extrapolation of (a) the engine's
  own ``likelihood.log_likelihood`` and (b) the plain pruning of
  tests/reference.py (one scipy.linalg.expm per branch, DendroPy's parse of the
  tree, Q built from the rate structure without the engine: Felsenstein 1981,
  J. Mol. Evol. 17:368 -- published source; scipy -- general-purpose reference
  library). The derivative of a smooth function equals the limit of its
  difference quotients (fact of the trade); with step h = 1e-3 and one
  Richardson step the truncation error is O(h^4) and the rounding error about
  1e-16 |ln L| / h, far below the 1e-6 relative tolerance used here.
- two tips under the equal-rates model: L = (1/k) P_{x1 x2}(t1 + t2) with
  P_ii(t) = 1/k + (k-1)/k e^{-kqt}, P_ij(t) = 1/k - 1/k e^{-kqt} (Jukes & Cantor
  1969; Lewis 2001, Syst. Biol. 50:913 -- published closed form), differentiated
  by hand below.
- all tips missing: every row of P(t) sums to one, so L = 1 and the gradient is
  zero (fact of the trade).
- fits: the maximum reached with the exact gradient is compared with scipy's
  L-BFGS-B using its own finite-difference gradient from the same starts
  (general-purpose reference library).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.optimize
from conftest import (
    CUSTOM_SPECS,
    make_model_case,
    partials_from_cells,
    random_newick,
    tip_data_mapping,
    yule_arrays,
)
from reference import (
    newick_from_arrays,
    pruning_log_likelihood,
    q_from_rates,
    ref_tree_from_newick,
    stationary_is_unique,
)

from mkforest.data.trees import parse_newick
from mkforest.engine import fitting
from mkforest.engine.fitting import fit_model
from mkforest.engine.gradient import exact_gradient_applies, log_likelihood_and_gradient
from mkforest.engine.likelihood import eigensystem, log_likelihood
from mkforest.engine.models import build_model

RTOL = 1e-6  # relative, per component
ATOL = 1e-8  # absolute floor for components near zero (finite differences reach ~1e-10)
STEP = 1e-3  # finite-difference step in log-rate


# --------------------------------------------------------------------------- helpers


def richardson_gradient(f, x, step=STEP):
    """d f / d x_p by central differences at steps h and h/2, combined by one
    Richardson step: (4 D(h/2) - D(h)) / 3 (error O(h^4); fact of the trade)."""
    g = np.empty(len(x))
    for p in range(len(x)):
        d = []
        for h in (step, step / 2):
            e = np.zeros(len(x))
            e[p] = h
            d.append((f(x + e) - f(x - e)) / (2 * h))
        g[p] = (4 * d[1] - d[0]) / 3
    return g


def assert_gradient_close(got, expected, what):
    got, expected = np.asarray(got), np.asarray(expected)
    assert np.all(np.isfinite(got)), what
    bad = np.abs(got - expected) > RTOL * np.abs(expected) + ATOL
    assert not bad.any(), f"{what}\nexact      {got}\nfinite-dif {expected}"


def rates_from_q(model, Q):
    """The model's free rates read off a Q built independently (each parameter's entries)."""
    rates = np.empty(model.n_params)
    for p in range(model.n_params):
        i, j = np.argwhere(model.rate_index == p)[0]
        rates[p] = Q[i, j]
    return rates


def reference_q_of(model, Q):
    """theta -> Q(theta) built from the rate structure alone: the fixed entries of Q,
    plus theta_p on every entry that parameter p governs; diagonal = minus the row sum
    (dQ/dtheta_p is the indicator of p's entries, minus its row sums on the diagonal)."""
    off = np.where(model.rate_index == -2, Q, 0.0)
    np.fill_diagonal(off, 0.0)

    def q_of(theta):
        o = off.copy()
        for p, value in enumerate(theta):
            o[model.rate_index == p] = value
        return q_from_rates(o)

    return q_of


def engine_fd(tree, partials, model, rates, root):
    f = lambda x: log_likelihood(tree, partials, model.q_matrix(np.exp(x)), root, model.states)  # noqa: E731
    return richardson_gradient(f, np.log(rates))


def roots_of(model):
    return ["uniform", "data_weighted", "stationary", *model.states]


def make_case(seed, n_min=5, n_max=40):
    """A random tree (polytomies, zero-length branches), a model of every kind in turn,
    rates, and tip data simulated under Q with missing and ambiguous cells."""
    rng = np.random.default_rng(7000 + seed)
    model, rates, Q = make_model_case(rng, seed)
    if rates is None:
        rates = rates_from_q(model, Q)
    np.testing.assert_allclose(model.q_matrix(rates), Q, atol=1e-14)  # the engine's Q is this Q
    newick = random_newick(rng, int(rng.integers(n_min, n_max + 1)))
    tree = parse_newick(newick)
    cells = tip_data_mapping(rng, tree, Q, list(model.states))
    partials = partials_from_cells(cells, tree.tip_labels, list(model.states))
    return dict(
        model=model, rates=rates, Q=Q, newick=newick, tree=tree, cells=cells, partials=partials
    )


# --------------------------------------------------------------------------- against finite differences

N_CASES = 40


@pytest.mark.parametrize("seed", range(N_CASES))
def test_gradient_equals_finite_differences_of_engine(seed):
    """Every model kind (equal, symmetric, unconstrained, custom with ties, fixed and
    forbidden rates, absorbing states), every root treatment, polytomies, zero-length
    branches, missing and ambiguous tips: exact gradient == Richardson central
    differences of likelihood.log_likelihood, and the returned ln L is the engine's."""
    c = make_case(seed)
    tree, partials, model, rates = c["tree"], c["partials"], c["model"], c["rates"]
    checked = 0
    for root in roots_of(model):
        expected_ll = log_likelihood(tree, partials, c["Q"], root, model.states)
        ll, grad = log_likelihood_and_gradient(tree, partials, model, rates, root)
        if not np.isfinite(expected_ll):
            assert ll == -np.inf and not grad.any()
            continue
        assert abs(ll - expected_ll) <= 1e-12 * max(1.0, abs(expected_ll)), (root, ll, expected_ll)
        assert_gradient_close(
            grad,
            engine_fd(tree, partials, model, rates, root),
            f"seed {seed} {model.kind} root {root!r} Q=\n{c['Q']}",
        )
        checked += 1
    assert checked >= 3  # uniform, data_weighted and stationary are always possible here


def test_random_cases_cover_the_analytic_routes():
    """The random cases above do exercise the analytic gradient (not only its fallback):
    complex eigenvalues, reducible chains (explicit P), every kind."""
    kinds, complex_eig, reducible, analytic, total = set(), 0, 0, 0, 0
    for seed in range(N_CASES):
        c = make_case(seed)
        kinds.add(c["model"].kind)
        es = eigensystem(c["Q"])
        total += 1
        if exact_gradient_applies(c["Q"], "uniform"):
            analytic += 1
            complex_eig += es[0].dtype == np.complex128
            reducible += bool(((c["Q"] == 0) & ~np.eye(len(c["Q"]), dtype=bool)).any())
    assert kinds == {"equal", "symmetric", "unconstrained", "custom"}
    assert analytic >= total - 3, (analytic, total)
    assert complex_eig >= 1 and reducible >= 3, (complex_eig, reducible)


@pytest.mark.parametrize("seed", range(16))
def test_gradient_equals_finite_differences_of_plain_expm_pruning(seed):
    """Against the independent reference: plain pruning with one scipy expm per branch
    on DendroPy's parse of the same Newick (tests/reference.py), Q(theta) built from
    the rate structure without the engine."""
    c = make_case(100 + seed, n_min=4, n_max=12)
    model, rates = c["model"], c["rates"]
    ref_tree = ref_tree_from_newick(c["newick"])
    ref_partials = partials_from_cells(c["cells"], ref_tree.tip_labels, list(model.states))
    q_of = reference_q_of(model, c["Q"])
    np.testing.assert_allclose(q_of(rates), c["Q"], atol=1e-14)
    for root in roots_of(model):
        if root == "stationary" and not stationary_is_unique(c["Q"]):
            continue
        f = lambda x: pruning_log_likelihood(
            ref_tree,
            ref_partials,
            q_of(np.exp(x)),
            root,  # noqa: E731
            list(model.states),
        )
        if not np.isfinite(f(np.log(rates))):
            continue
        ll, grad = log_likelihood_and_gradient(c["tree"], c["partials"], model, rates, root)
        assert abs(ll - f(np.log(rates))) < 1e-9
        assert_gradient_close(
            grad, richardson_gradient(f, np.log(rates)), f"seed {seed} {model.kind} root {root!r}"
        )


# --------------------------------------------------------------------------- special structures

CYCLE = (
    ("p", "q", "r"),
    {
        "p -> q -> r": "forward",
        "r -> p": "forward",
        "q -> p": "backward",
        "r -> q": "backward",
        "p -> r": "backward",
    },
)


@pytest.mark.parametrize("root", ["uniform", "data_weighted", "stationary", "q"])
def test_complex_eigenvalues_nonreversible_cycle(root):
    """A non-reversible three-state cycle (fast one way round, slow the other) has
    complex eigenvalues; its gradient matches finite differences of the engine on a
    60-tip tree and of the plain expm pruning on a 9-tip tree."""
    states, transitions = CYCLE
    model = build_model("custom", states, transitions)
    rates = (
        np.array([3.0, 0.1]) if model.labels == ("forward", "backward") else np.array([0.1, 3.0])
    )
    Q = model.q_matrix(rates)
    lam = eigensystem(Q)[0]
    assert lam.dtype == np.complex128 and np.abs(lam.imag).max() > 1.0
    assert exact_gradient_applies(Q, root)
    rng = np.random.default_rng(11)
    for n_tips, reference in ((60, False), (9, True)):
        newick = random_newick(rng, n_tips, p_zero=0.05)
        tree = parse_newick(newick)
        cells = tip_data_mapping(rng, tree, Q, list(states))
        partials = partials_from_cells(cells, tree.tip_labels, list(states))
        ll, grad = log_likelihood_and_gradient(tree, partials, model, rates, root)
        assert_gradient_close(grad, engine_fd(tree, partials, model, rates, root), f"engine {root}")
        if reference:
            ref_tree = ref_tree_from_newick(newick)
            ref_partials = partials_from_cells(cells, ref_tree.tip_labels, list(states))
            q_of = reference_q_of(model, Q)
            f = lambda x: pruning_log_likelihood(
                ref_tree,
                ref_partials,
                q_of(np.exp(x)),
                root,  # noqa: E731
                list(states),
            )
            assert_gradient_close(grad, richardson_gradient(f, np.log(rates)), f"reference {root}")


@pytest.mark.parametrize("spread", [0.0, 1e-12, 1e-8, 1e-5, 1e-3, 3e-2])
@pytest.mark.parametrize("k", [3, 4])
def test_near_equal_eigenvalues(k, spread):
    """unconstrained rates 1 + spread * noise: at spread 0 the eigenvalue -k is
    repeated k-1 times (equal-rates chain, closed form of Lewis 2001), and small
    spreads give eigenvalues closer than any difference quotient could resolve.
    The gradient still matches finite differences."""
    states = [f"s{i}" for i in range(k)]
    model = build_model("unconstrained", states)
    rng = np.random.default_rng(int(1e6 * spread) + k)
    rates = 1.0 + spread * rng.uniform(-1, 1, model.n_params)
    Q = model.q_matrix(rates)
    es = eigensystem(Q)
    assert es is not None
    lam = np.sort_complex(es[0])
    if spread <= 1e-8:
        assert np.abs(np.diff(lam[:-1])).max() < 1e-6  # the near-repeated eigenvalues
    labels, parent, length = yule_arrays(rng, 40, height=1.5)
    tree = parse_newick(newick_from_arrays(labels, parent, length))
    cells = tip_data_mapping(rng, tree, Q, states, p_missing=0.1, p_ambiguous=0.1)
    partials = partials_from_cells(cells, tree.tip_labels, states)
    for root in ("uniform", "data_weighted", "stationary", states[0]):
        _, grad = log_likelihood_and_gradient(tree, partials, model, rates, root)
        assert_gradient_close(
            grad,
            engine_fd(tree, partials, model, rates, root),
            f"k {k} spread {spread} root {root}",
        )


def test_zero_length_branches():
    """Zero-length branches at tips and inside the tree (P = I, dP = 0 there) and a
    zero-length cherry: gradient == finite differences."""
    newick = "[&R] ((a:0,b:0):0.3,(c:0.2,(d:0,(e:0.4,f:0):0):0.5):0.1,(g:0.7,h:0.2):0);"
    tree = parse_newick(newick)
    model = build_model("unconstrained", ["x", "y", "z"])
    rates = np.array([0.9, 0.3, 1.4, 0.6, 0.2, 1.1])
    cells = {"a": "y", "b": "y", "c": "x", "d": "z", "e": "x|z", "f": "z", "g": "?", "h": "y"}
    partials = partials_from_cells(cells, tree.tip_labels, ["x", "y", "z"])
    assert (tree.length[: tree.n_nodes - 1] == 0).sum() >= 5
    for root in roots_of(model):
        ll, grad = log_likelihood_and_gradient(tree, partials, model, rates, root)
        assert np.isfinite(ll)
        assert_gradient_close(grad, engine_fd(tree, partials, model, rates, root), f"root {root}")


@pytest.mark.parametrize("index", range(len(CUSTOM_SPECS)))
def test_reducible_and_defective_chains(index):
    """Custom models with forbidden and fixed rates, absorbing states, ties. Reducible
    chains with well-conditioned eigenvectors use the analytic gradient (explicit P, as
    the likelihood kernel does); defective ones (a chain with one tied rate has a
    repeated eigenvalue without a full set of eigenvectors) use central differences.
    Both must match the plain expm pruning."""
    states, transitions = CUSTOM_SPECS[index]
    model = build_model("custom", states, transitions)
    rng = np.random.default_rng(500 + index)
    rates = rng.uniform(0.2, 2.0, model.n_params)
    Q = model.q_matrix(rates)
    newick = random_newick(rng, 10, p_zero=0.1)
    tree = parse_newick(newick)
    cells = tip_data_mapping(rng, tree, Q, list(states), p_missing=0.2, p_ambiguous=0.2)
    partials = partials_from_cells(cells, tree.tip_labels, list(states))
    ref_tree = ref_tree_from_newick(newick)
    ref_partials = partials_from_cells(cells, ref_tree.tip_labels, list(states))
    q_of = reference_q_of(model, Q)
    checked = 0
    for root in ["uniform", "data_weighted", *states] + (
        ["stationary"] if stationary_is_unique(Q) else []
    ):
        f = lambda x: pruning_log_likelihood(
            ref_tree,
            ref_partials,
            q_of(np.exp(x)),
            root,  # noqa: E731
            list(states),
        )
        if not np.isfinite(f(np.log(rates))):
            continue
        ll, grad = log_likelihood_and_gradient(tree, partials, model, rates, root)
        assert abs(ll - f(np.log(rates))) < 1e-9
        assert_gradient_close(
            grad, richardson_gradient(f, np.log(rates)), f"{transitions} root {root}"
        )
        checked += 1
    assert checked >= 2


def test_defective_chain_takes_the_fallback_and_others_do_not():
    """The routes claimed in the module docstring: a tied forward chain is defective
    (finite differences); a chain with distinct rates and the irreducible kinds are not."""
    tied = build_model("custom", ["e", "m", "l"], {"e -> m -> l": "step"})
    assert not exact_gradient_applies(tied.q_matrix([0.7]), "uniform")
    untied = build_model("custom", ["e", "m", "l"], {"e -> m": "a", "m -> l": "b"})
    assert exact_gradient_applies(untied.q_matrix([0.7, 1.9]), "uniform")
    assert not exact_gradient_applies(untied.q_matrix([0.7, 1.9]), "stationary")  # reducible
    for kind in ("equal", "symmetric", "unconstrained"):
        m = build_model(kind, ["a", "b", "c", "d"])
        Q = m.q_matrix(np.random.default_rng(0).uniform(0.2, 2.0, m.n_params))
        assert all(
            exact_gradient_applies(Q, r) for r in ("uniform", "data_weighted", "stationary", "a")
        )


# --------------------------------------------------------------------------- closed forms


@pytest.mark.parametrize("k", [2, 3, 4])
@pytest.mark.parametrize("same", [True, False])
def test_two_tips_equal_rates_closed_form(k, same):
    """Two tips, equal-rates chain, uniform root: L = (1/k) P_{x1 x2}(T), T = t1 + t2
    (Jukes & Cantor 1969; Lewis 2001 -- published closed form). With E = e^{-kqT}:
    same state:      L = (1/k)(1/k + (k-1)/k E), dL/dq = -(k-1) T E / k
    different state: L = (1/k^2)(1 - E),          dL/dq = T E / k
    and d lnL / d ln q = q (dL/dq) / L (worked by hand)."""
    q, t1, t2 = 0.8, 0.35, 0.9
    T = t1 + t2
    E = math.exp(-k * q * T)
    if same:
        L, dL = (1 / k) * (1 / k + (k - 1) / k * E), -(k - 1) * T * E / k
    else:
        L, dL = (1 - E) / k**2, T * E / k
    states = [f"s{i}" for i in range(k)]
    tree = parse_newick(f"(a:{t1},b:{t2});")
    partials = np.zeros((2, k))
    partials[tree.tip_labels.index("a"), 0] = 1.0
    partials[tree.tip_labels.index("b"), 0 if same else 1] = 1.0
    ll, grad = log_likelihood_and_gradient(
        tree, partials, build_model("equal", states), [q], "uniform"
    )
    assert ll == pytest.approx(math.log(L), rel=1e-13)
    assert grad[0] == pytest.approx(q * dL / L, rel=1e-10)


@pytest.mark.parametrize("root", ["uniform", "data_weighted", "stationary", "b"])
def test_all_tips_missing_gives_zero_gradient(root):
    """No data: every row of P(t) sums to one, so L = 1 whatever the rates and the
    gradient is zero (fact of the trade)."""
    rng = np.random.default_rng(3)
    tree = parse_newick(random_newick(rng, 25, p_zero=0.0))
    model = build_model("unconstrained", ["a", "b", "c"])
    partials = np.ones((tree.n_tips, 3))
    ll, grad = log_likelihood_and_gradient(tree, partials, model, rng.uniform(0.2, 2, 6), root)
    assert abs(ll) < 1e-12
    assert np.abs(grad).max() < 1e-10


# --------------------------------------------------------------------------- large trees, impossible data


def test_large_tree_gradient_with_rescaling():
    """2,000 tips: L underflows a double (ln L < -745) and the passes are rescaled; the
    gradient is finite and matches finite differences of the engine."""
    rng = np.random.default_rng(2000)
    labels, parent, length = yule_arrays(rng, 2000, height=2.0)
    tree = parse_newick(newick_from_arrays(labels, parent, length))
    model = build_model("unconstrained", ["x", "y", "z"])
    rates = np.array([1.5, 0.4, 0.8, 0.9, 0.3, 1.1])
    Q = model.q_matrix(rates)
    cells = tip_data_mapping(rng, tree, Q, ["x", "y", "z"], p_missing=0.05, p_ambiguous=0.05)
    partials = partials_from_cells(cells, tree.tip_labels, ["x", "y", "z"])
    for root in ("uniform", "data_weighted", "stationary", "y"):
        ll, grad = log_likelihood_and_gradient(tree, partials, model, rates, root)
        assert ll < -745
        assert_gradient_close(grad, engine_fd(tree, partials, model, rates, root), f"root {root}")


def test_impossible_data_give_minus_infinity_and_zero_gradient():
    """An irreversible loss cannot bring 'present' back: with the root fixed at 'absent'
    and a tip 'present' the data are impossible (ln L = -inf, as the engine says)."""
    model = build_model("custom", ["present", "absent"], {"present -> absent": "loss"})
    tree = parse_newick("((a:0.2,b:0.3):0.1,c:0.5);")
    partials = partials_from_cells(
        {"a": "present", "b": "absent", "c": "absent"}, tree.tip_labels, ["present", "absent"]
    )
    assert log_likelihood(tree, partials, model.q_matrix([0.5]), "absent", model.states) == -np.inf
    ll, grad = log_likelihood_and_gradient(tree, partials, model, [0.5], "absent")
    assert ll == -np.inf and grad.shape == (1,) and grad[0] == 0.0
    ll, grad = log_likelihood_and_gradient(tree, partials, model, [0.5], "present")
    assert np.isfinite(ll)
    assert_gradient_close(
        grad, engine_fd(tree, partials, model, np.array([0.5]), "present"), "present"
    )


# --------------------------------------------------------------------------- fits


def scipy_fd_fit(tree, partials, model, root, n_starts=5, seed=0):
    """Best ln L of scipy's L-BFGS-B with its own finite-difference gradient, from the
    same starts, bounds and options as fit_model."""
    p = model.n_params
    starts, (lo, hi) = fitting.starting_points(tree, partials, model, n_starts, seed)

    def objective(x):
        ll = log_likelihood(tree, partials, model.q_matrix(np.exp(x)), root, model.states)
        return -ll if np.isfinite(ll) else 1e8

    best = min(
        scipy.optimize.minimize(
            objective,
            x0,
            method="L-BFGS-B",
            bounds=[(lo, hi)] * p,
            options={"maxiter": 1000, "ftol": 1e-10, "gtol": 1e-6},
        ).fun
        for x0 in starts
    )
    return -best


@pytest.mark.parametrize("seed", range(12))
def test_fit_with_gradient_reaches_the_finite_difference_optimum(seed):
    """fit_model (exact gradient) reaches ln L >= the finite-difference fit's - 1e-6."""
    c = make_case(300 + seed, n_min=20, n_max=50)
    model = c["model"]
    root = ["uniform", "data_weighted", "stationary", model.states[-1]][seed % 4]
    if not np.isfinite(log_likelihood(c["tree"], c["partials"], c["Q"], root, model.states)):
        root = "uniform"
    fit = fit_model(c["tree"], c["partials"], model, root, seed=seed)
    old = scipy_fd_fit(c["tree"], c["partials"], model, root, seed=seed)
    assert fit.log_likelihood >= old - 1e-6, (model.kind, root, fit.log_likelihood, old)
    # the reported ln L is the likelihood at the reported rates
    assert fit.log_likelihood == pytest.approx(
        log_likelihood(c["tree"], c["partials"], model.q_matrix(fit.rates), root, model.states),
        abs=1e-9,
    )


def test_fit_objective_handles_impossible_starts():
    """Where the data are impossible at a start, the objective is the finite stand-in
    with a zero gradient and the fit still finds the possible region or says it cannot."""
    model = build_model("custom", ["present", "absent"], {"present -> absent": "loss"})
    tree = parse_newick("((a:0.2,b:0.3):0.1,c:0.5);")
    partials = partials_from_cells(
        {"a": "present", "b": "absent", "c": "absent"}, tree.tip_labels, ["present", "absent"]
    )
    fit = fit_model(tree, partials, model, "absent")
    assert fit.log_likelihood == -np.inf and not fit.converged and fit.notes
    fit = fit_model(tree, partials, model, "present")
    assert np.isfinite(fit.log_likelihood)


@pytest.mark.parametrize("seed", range(0, N_CASES, 4))
def test_one_call_path_equals_the_general_path(seed):
    """gradient.Evaluator's compiled one-call path (Q, eigensystem and kernel together)
    gives the same ln L and gradient as its general path (Q and the eigensystem in
    Python, the path the finite-difference checks above also cover), on the random
    cases above and on their two-class hidden-rate versions: bit for bit where every
    eigenvalue is real (the same solver); to 1e-12 where some are complex (LAPACK's
    complex solver on Q there, NumPy's real one on the general path)."""
    from mkforest.engine.gradient import Evaluator
    from mkforest.engine.hidden import with_hidden_classes

    c = make_case(seed)
    for model, partials in (
        (c["model"], c["partials"]),
        (with_hidden_classes(c["model"], 2, "equal"), None),
    ):
        if partials is None:
            partials = model.expand_tips(c["partials"])
        rates = np.exp(np.random.default_rng(seed).normal(-0.5, 0.7, model.n_params))
        for root in ("uniform", "data_weighted"):
            ev = Evaluator(c["tree"], partials, model, root)
            ll1, g1, _ = ev(rates)
            g1 = g1.copy()
            ev.fused = False
            ll2, g2, _ = ev(rates)
            if not np.linalg.eigvals(model.q_matrix(rates)).imag.any():
                assert ll1 == ll2 or (np.isnan(ll1) and np.isnan(ll2))
                np.testing.assert_array_equal(g1, g2)
            else:
                assert ll1 == pytest.approx(ll2, rel=1e-12, abs=1e-12)
                np.testing.assert_allclose(g1, g2, rtol=1e-9, atol=1e-10)


@pytest.mark.parametrize("seed", range(6))
def test_one_call_path_with_complex_eigenvalues(seed):
    """Rates that cycle (complex eigenvalues): the one-call path (LAPACK's complex
    solver on Q, in compiled code) against the general path (NumPy's real solver),
    ln L to 1e-12 and the gradient (rates and branch lengths) to 1e-9, on 3- and
    4-state models with every rate free, the hidden-class version of one, and both
    roots the one-call path serves; the case counts as covered only where Q's
    eigenvalues are complex."""
    from mkforest.engine.gradient import Evaluator
    from mkforest.engine.hidden import with_hidden_classes

    rng = np.random.default_rng(seed)
    covered = 0
    for k in (3, 4):
        states = tuple("abcd"[:k])
        model = build_model("unconstrained", states)
        # a fast cycle a -> b -> c (-> d) -> a over slow other rates
        Q = np.full((k, k), 0.05)
        for i in range(k):
            Q[i, (i + 1) % k] = 2.0 + rng.uniform(0, 1)
        rates = np.array([Q[i, j] for i in range(k) for j in range(k) if i != j])
        assert np.allclose(model.q_matrix(rates)[~np.eye(k, dtype=bool)], rates)
        tree = parse_newick(random_newick(rng, 40, p_zero=0.05))
        cells = tip_data_mapping(rng, tree, model.q_matrix(rates), list(states))
        X = partials_from_cells(cells, tree.tip_labels, list(states))
        cases = [(model, X, rates)]
        if k == 3:
            hidden = with_hidden_classes(model, 2, "equal")
            cases.append(
                (
                    hidden,
                    hidden.expand_tips(X),
                    np.append(np.concatenate([rates, 0.5 * rates]), 0.3)[: hidden.n_params],
                )
            )
        for m, partials, r in cases:
            if not np.linalg.eigvals(m.q_matrix(r)).imag.any():
                continue
            for root in ("uniform", "data_weighted"):
                ev = Evaluator(tree, partials, m, root)
                ll1, g1, d1 = ev(r)
                g1, d1 = g1.copy(), d1.copy()
                ev.fused = False
                ll2, g2, d2 = ev(r)
                assert np.isfinite(ll1)
                assert ll1 == pytest.approx(ll2, rel=1e-12, abs=1e-12)
                np.testing.assert_allclose(g1, g2, rtol=1e-9, atol=1e-10)
                np.testing.assert_allclose(d1, d2, rtol=1e-9, atol=1e-10)
                covered += 1
    assert covered >= 4
