"""Benchmark: log-likelihood, its gradient, and maximum-likelihood fits.

    .venv/bin/python benchmarks/bench_likelihood.py [--repeat 5] [--fit-trees 10]

Sections:
1. one evaluation of ln L, of ln L + exact gradient (mkforest.engine.gradient) and of
   ln L + a forward-difference gradient (p + 1 likelihoods, what L-BFGS-B does
   without a gradient), symmetric (real eigenvalues) and unconstrained (a fast
   one-way cycle: complex eigenvalues) models on 4 states, 500 and 2,000 tips;
2. one unconstrained 4-state fit on 500 tips with its 5 starts: before (scipy's
   finite-difference gradient on the same objective, starts and bounds) and
   after (fit_model, exact gradient);
3. the workflow's unit of work: fits of equal / symmetric / unconstrained on
   200-tip trees, and what 1,000 trees x 4 traits x 3 models cost on 2 cores.

Every timing is the minimum over ``--repeat`` runs (other jobs share the
machine). numba compilation is done before anything is timed.
"""

from __future__ import annotations

import os

# the matrices are tiny (k <= 8): BLAS threads only add contention
for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_var] = "1"

import argparse  # noqa: E402
import math  # noqa: E402
import time  # noqa: E402

import numpy as np  # noqa: E402
from bench_mapping import pure_birth_tree  # noqa: E402
from scipy.optimize import minimize  # noqa: E402

from mkforest.engine import fitting  # noqa: E402
from mkforest.engine.descent import IMPOSSIBLE_OBJECTIVE  # noqa: E402
from mkforest.engine.fitting import LogLikelihood, fit_model  # noqa: E402
from mkforest.engine.gradient import log_likelihood_and_gradient  # noqa: E402
from mkforest.engine.models import build_model  # noqa: E402
from mkforest.engine.simulate import simulate_states, tip_partials_from_states  # noqa: E402

STATES4 = ("w", "x", "y", "z")


def best_time(fn, repeat, number=1):
    """Minimum over ``repeat`` runs of the mean time of ``number`` calls."""
    best = math.inf
    for _ in range(repeat):
        t0 = time.perf_counter()
        for _ in range(number):
            fn()
        best = min(best, (time.perf_counter() - t0) / number)
    return best


def make_case(rng, n_tips, model, rates, index=0):
    tree = pure_birth_tree(rng, n_tips, index=index)
    s = simulate_states(tree, model.q_matrix(rates), rng)
    return tree, tip_partials_from_states(s, tree.n_tips, model.k)


def fit_finite_difference(tree, X, model, root="uniform", n_starts=5, seed=0):
    """The fit as it was before the exact gradient: the same objective, starts,
    bounds and options, with scipy's finite-difference gradient. Returns best ln L."""
    f = LogLikelihood(tree, X, model, root)
    p = model.n_params
    starts, (lo, hi) = fitting.starting_points(tree, X, model, n_starts, seed)

    def objective(x):
        ll = f(np.exp(x))
        return -ll if np.isfinite(ll) else IMPOSSIBLE_OBJECTIVE

    best = math.inf
    for x0 in starts:
        res = minimize(
            objective,
            x0,
            method="L-BFGS-B",
            bounds=[(lo, hi)] * p,
            options={"maxiter": 1000, "ftol": 1e-10, "gtol": 1e-6},
        )
        best = min(best, res.fun)
    return -best


def cycle_rates(model, fast=2.0, slow=0.2):
    """unconstrained rates with a fast one-way cycle w -> x -> y -> z -> w: a
    non-reversible chain with complex eigenvalues."""
    k = model.k
    rates = np.full(model.n_params, slow)
    for i in range(k):
        rates[model.rate_index[i, (i + 1) % k]] = fast
    return rates


def section_evaluations(rng, repeat):
    print("1. one evaluation on 4 states, uniform root")
    print(
        f"   {'model':<14} {'tips':>5} {'lnL':>10} {'lnL+grad':>10} {'ratio':>6} {'lnL+fwd diff':>13}"
        "  eigenvalues"
    )
    for kind in ("symmetric", "unconstrained"):
        model = build_model(kind, STATES4)
        rates = rng.uniform(0.3, 1.5, model.n_params) if kind == "symmetric" else cycle_rates(model)
        lam = np.linalg.eigvals(model.q_matrix(rates))
        shown = "complex" if np.iscomplexobj(lam) and np.abs(lam.imag).max() > 0 else "real"
        for n_tips in (500, 2000):
            tree, X = make_case(rng, n_tips, model, rates)
            f = LogLikelihood(tree, X, model)
            f(rates)
            log_likelihood_and_gradient(tree, X, model, rates)
            number = 100 if n_tips <= 500 else 25
            t_ll = best_time(lambda: f(rates), 3 * repeat, number)
            t_grad = best_time(
                lambda: log_likelihood_and_gradient(tree, X, model, rates), 3 * repeat, number
            )
            t_fd = t_ll * (model.n_params + 1)
            print(
                f"   {kind:<14} {n_tips:>5} {1e3 * t_ll:8.3f}ms {1e3 * t_grad:8.3f}ms "
                f"{t_grad / t_ll:6.2f} {1e3 * t_fd:11.3f}ms  {shown}"
            )


def section_fit(rng, repeat):
    model = build_model("unconstrained", STATES4)
    rates = rng.uniform(0.3, 1.5, model.n_params)
    tree, X = make_case(rng, 500, model, rates)
    fit_model(tree, X, model, seed=1)
    t_old = best_time(lambda: fit_finite_difference(tree, X, model, seed=1), max(1, repeat // 2))
    t_new = best_time(lambda: fit_model(tree, X, model, seed=1), repeat)
    ll_old = fit_finite_difference(tree, X, model, seed=1)
    ll_new = fit_model(tree, X, model, seed=1).log_likelihood
    print("2. one fit, unconstrained on 4 states, 500 tips, 5 starts")
    print(f"   before (finite differences) {t_old:8.3f} s   ln L {ll_old:.6f}")
    print(f"   after  (exact gradient)     {t_new:8.3f} s   ln L {ll_new:.6f}")
    print(f"   speed-up {t_old / t_new:.1f}x")


def section_workflow(rng, repeat, n_trees):
    print(
        f"3. fits on 200-tip trees (mean over {n_trees} trees, each the minimum of "
        f"{repeat} runs), 5 starts, uniform root"
    )
    total = 0.0
    for k in (3, 4):
        states = STATES4[:k]
        truth = build_model("unconstrained", states)
        rates = rng.uniform(0.3, 1.5, truth.n_params)
        cases = [make_case(rng, 200, truth, rates, index=i) for i in range(n_trees)]
        per_model = []
        for kind in ("equal", "symmetric", "unconstrained"):
            model = build_model(kind, states)
            fit_model(*cases[0], model, seed=0)
            secs = np.mean(
                [
                    best_time(lambda c=c: fit_model(*c, model, seed=c[0].index), repeat)
                    for c in cases
                ]
            )
            per_model.append(secs)
            print(f"   k={k} {kind:<14} {1e3 * secs:8.1f} ms per fit")
        total = max(total, sum(per_model))
    # 1,000 trees x 4 traits x (equal + symmetric + unconstrained), 2 processes
    est = 1000 * 4 * total / 2
    print(
        f"   1,000 trees x 4 traits x 3 models on 2 cores (slower of k=3/k=4): "
        f"about {est / 60:.1f} min of fitting"
    )


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=5)
    ap.add_argument("--fit-trees", type=int, default=10)
    ap.add_argument("--skip-fit", action="store_true", help="only the per-evaluation timings")
    args = ap.parse_args()
    rng = np.random.default_rng(7)
    section_evaluations(rng, args.repeat)
    if not args.skip_fit:
        section_fit(rng, args.repeat)
        section_workflow(rng, args.repeat, args.fit_trees)


if __name__ == "__main__":
    main()
