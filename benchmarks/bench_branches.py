"""Benchmark: what a branch-length treatment adds to a fit's time.

    .venv/bin/python benchmarks/bench_branches.py [--repeat 3] [--trees 10] [--tips 200]

1. one evaluation of ln L + gradient: the plain fit's objective (an Evaluator kept
   across calls, at exp of the log-rates, as in fit_model) against the treatment
   fit's (treatment_search.TreatmentSpace.objective: the treatment's lengths and
   d lengths / d theta, the rates' scaling and the chain rule for the extra
   parameter, in one compiled call where it applies);
2. whole fits (fit_model, the workflow's default starts) of equal, symmetric and
   unconstrained 3-state models on Yule trees: as_given, unit (a fixed
   treatment: the tree is transformed once) and each estimated treatment; mean
   over --trees trees of the minimum of --repeat runs, and the ratio to as_given.
   An estimated treatment adds a parameter, so the optimiser also needs more
   iterations; both the per-evaluation cost and the iteration count are shown.

Every timing is the minimum over ``--repeat`` runs (other jobs share the machine);
numba compilation is done before anything is timed.
"""

from __future__ import annotations

import os

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_var] = "1"

import argparse  # noqa: E402

import numpy as np  # noqa: E402
from bench_likelihood import best_time, make_case  # noqa: E402

from mkforest.engine.branches import ESTIMABLE, NULL_VALUE, Treatment  # noqa: E402
from mkforest.engine.fitting import fit_model  # noqa: E402
from mkforest.engine.gradient import Evaluator  # noqa: E402
from mkforest.engine.models import build_model  # noqa: E402
from mkforest.engine.treatment_search import TreatmentSpace  # noqa: E402

STATES = ("x", "y", "z")
TREATMENTS = ("as_given", "unit", *ESTIMABLE)
INSIDE = {"kappa": 0.7, "lambda": 0.7, "delta": 0.7, "early_burst": -1.0}  # within the bounds


def section_evaluation(rng, repeat, n_tips):
    """Plain and treated evaluations timed in alternation, round after round, each the
    minimum over rounds: a machine whose load drifts slows both alike."""
    model = build_model("unconstrained", STATES)
    rates = rng.uniform(0.3, 1.5, model.n_params)
    tree, X = make_case(rng, n_tips, model, rates)
    evaluate = Evaluator(tree, X, model, "uniform")
    y = np.log(rates)

    def plain():  # fit_model's objective on the given lengths
        ll, grad, _ = evaluate(np.exp(y))
        return -ll, -grad

    calls = {"as_given": plain}
    for name in ESTIMABLE:
        space = TreatmentSpace(tree, X, model, "uniform", Treatment(name))
        xb = INSIDE[name] if name != "delta" else np.log(INSIDE[name])  # ln delta
        x = np.append(np.log(rates), (xb - NULL_VALUE[name]) / space.s)
        calls[name] = lambda objective=space.objective, x=x: objective(x)
    best = {name: np.inf for name in calls}
    for _ in range(10 * repeat):
        for name, fn in calls.items():
            best[name] = min(best[name], best_time(fn, 1, 50))
    print(
        f"1. one evaluation of ln L + gradient, unconstrained 3 states, {n_tips} tips "
        f"(minimum over {10 * repeat} alternating rounds of 50 calls)"
    )
    plain = best["as_given"]
    for name, t in best.items():
        print(f"   {name:<12} {1e6 * t:8.1f} us   x{t / plain:.2f}")


def section_fits(rng, repeat, n_trees, n_tips):
    print(
        f"2. whole fits, 3 states, {n_tips}-tip trees, mean over {n_trees} trees "
        f"(minimum of {repeat} runs each)"
    )
    truth = build_model("unconstrained", STATES)
    rates = rng.uniform(0.3, 1.5, truth.n_params)
    cases = [make_case(rng, n_tips, truth, rates, index=i) for i in range(n_trees)]
    head = "".join(f"{t:>17}" for t in TREATMENTS)
    print(f"   {'model':<14}{head}")
    for kind in ("equal", "symmetric", "unconstrained"):
        model = build_model(kind, STATES)
        times = {}
        for name in TREATMENTS:
            tr = Treatment(name)
            fit_model(*cases[0], model, seed=0, branches=tr)
            times[name] = np.mean(
                [
                    best_time(
                        lambda c=c: fit_model(*c, model, seed=c[0].index, branches=tr), repeat
                    )
                    for c in cases
                ]
            )
        base = times["as_given"]
        cells = "".join(f"{1e3 * times[t]:8.1f}ms x{times[t] / base:4.2f} " for t in TREATMENTS)
        print(f"   {kind:<14}{cells}")


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--trees", type=int, default=10)
    ap.add_argument("--tips", type=int, default=200)
    args = ap.parse_args()
    rng = np.random.default_rng(14)
    section_evaluation(rng, args.repeat, args.tips)
    section_fits(rng, args.repeat, args.trees, args.tips)


if __name__ == "__main__":
    main()
