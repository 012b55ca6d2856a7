"""The bare L-BFGS-B loop (mkforest.engine.lbfgsb) against scipy.optimize.minimize.

Reference: SciPy's own ``minimize(method="L-BFGS-B")`` (a general-purpose
library). The bare loop drives the same routine with the same settings, so it
must visit the same points and stop at the same x, not merely a nearby one.
"""

import numpy as np
import pytest
from conftest import yule_newick
from scipy.optimize import minimize, rosen, rosen_der

from mkforest.data.trees import parse_newick
from mkforest.engine import lbfgsb
from mkforest.engine.fitting import fit_model
from mkforest.engine.models import build_model
from mkforest.engine.simulate import simulate_states, tip_partials_from_states


def _recorded(fun):
    calls = []

    def wrapped(x):
        calls.append(np.array(x, dtype=float))
        return fun(x)

    return wrapped, calls


def _rosen(x):
    return float(rosen(x)), rosen_der(x)


@pytest.mark.parametrize("n, seed", [(2, 0), (5, 1), (9, 2)])
@pytest.mark.parametrize("ftol, gtol", [(1e-10, 1e-6), (1e-2, 1e-3)])
def test_same_points_and_result_as_minimize(n, seed, ftol, gtol):
    rng = np.random.default_rng(seed)
    x0 = rng.uniform(-1.5, 1.5, n)
    lo = np.full(n, -1.0)
    hi = np.full(n, 0.8)  # the optimum (1, ..., 1) lies outside: some variables end on a bound
    f1, calls1 = _recorded(_rosen)
    x = lbfgsb.minimise(f1, x0, lo, hi, ftol=ftol, gtol=gtol, maxiter=1000)
    f2, calls2 = _recorded(_rosen)
    res = minimize(
        f2,
        x0,
        method="L-BFGS-B",
        jac=True,
        bounds=list(zip(lo, hi)),
        options={"maxiter": 1000, "ftol": ftol, "gtol": gtol},
    )
    assert np.array_equal(x, res.x)
    # minimize evaluates x0 once more on its own (its function wrapper's first call)
    distinct1 = {c.tobytes() for c in calls1}
    distinct2 = {c.tobytes() for c in calls2}
    assert distinct1 == distinct2


def test_maxiter_is_honoured_like_minimize():
    x0 = np.array([-1.2, 1.0, -0.5, 0.3])
    lo, hi = np.full(4, -2.0), np.full(4, 2.0)
    x = lbfgsb.minimise(_rosen, x0, lo, hi, ftol=1e-12, gtol=1e-9, maxiter=3)
    res = minimize(
        _rosen,
        x0,
        method="L-BFGS-B",
        jac=True,
        bounds=list(zip(lo, hi)),
        options={"maxiter": 3, "ftol": 1e-12, "gtol": 1e-9},
    )
    assert np.array_equal(x, res.x)
    assert rosen(x) > 1e-3  # stopped early, not at the optimum


def test_fallback_to_minimize_gives_the_same_fit(monkeypatch):
    rng = np.random.default_rng(7)
    tree = parse_newick(yule_newick(rng, 40))
    model = build_model("unconstrained", ("a", "b", "c"))
    states = simulate_states(tree, model.q_matrix(rng.uniform(0.5, 2.0, model.n_params)), rng)
    X = tip_partials_from_states(states, tree.n_tips, 3)
    bare = fit_model(tree, X, model, seed=3)
    monkeypatch.setattr(lbfgsb, "_direct", False)
    public = fit_model(tree, X, model, seed=3)
    assert public.log_likelihood == pytest.approx(bare.log_likelihood, abs=1e-9)
    np.testing.assert_allclose(public.rates, bare.rates, rtol=1e-6)
    assert public.n_starts == bare.n_starts


def test_a_routine_with_another_signature_is_not_used(monkeypatch):
    class Other:
        @staticmethod
        def setulb(*args):  # e.g. an older SciPy's Fortran routine: different arguments
            raise TypeError("setulb() takes 16 positional arguments")

    monkeypatch.setattr(lbfgsb, "_lbfgsb", Other)
    monkeypatch.setattr(lbfgsb, "_direct", None)
    x = lbfgsb.minimise(
        _rosen, np.array([0.2, 0.1]), np.full(2, -1.0), np.full(2, 0.8), ftol=1e-10, gtol=1e-6
    )
    assert lbfgsb._direct is False
    res = minimize(
        _rosen,
        np.array([0.2, 0.1]),
        method="L-BFGS-B",
        jac=True,
        bounds=[(-1.0, 0.8)] * 2,
        options={"ftol": 1e-10, "gtol": 1e-6},
    )
    assert np.array_equal(x, res.x)


def test_the_bare_loop_is_used_with_this_scipy():
    lbfgsb.minimise(
        _rosen, np.array([0.2, 0.1]), np.full(2, -1.0), np.full(2, 0.8), ftol=1e-10, gtol=1e-6
    )
    assert lbfgsb._direct is True


@pytest.mark.parametrize("bare", [True, False])
def test_stop_ends_the_run_at_the_first_iterate_it_accepts(bare, monkeypatch):
    """``stop(x)`` is asked at every new iterate; the run returns the first one it
    accepts, an iterate of the same run without ``stop`` (checked on SciPy's
    Rosenbrock, in the bare loop and in the fallback through ``minimize``)."""
    monkeypatch.setattr(lbfgsb, "_direct", bare)
    x0 = np.array([-1.2, 1.0, -0.5, 0.3])
    lo, hi = np.full(4, -2.0), np.full(4, 2.0)
    iterates = []

    def record(x):
        iterates.append(np.array(x))
        return False

    full = lbfgsb.minimise(_rosen, x0, lo, hi, ftol=1e-12, gtol=1e-9, stop=record)
    assert rosen(full) < 1e-8 and len(iterates) > 10
    # the first iterate below 1 (the start is at 15.3)
    target = next(x for x in iterates if rosen(x) < 1.0)
    x = lbfgsb.minimise(_rosen, x0, lo, hi, ftol=1e-12, gtol=1e-9, stop=lambda x: rosen(x) < 1.0)
    assert np.array_equal(x, target)
    assert rosen(x) > 1e-3  # stopped early, not at the optimum
