"""Benchmark: CPU per fit with each branch-length treatment against the given lengths.

    .venv/bin/python benchmarks/bench_treatment_fits.py [--sets 10] [--repeat 3]

Two shapes: 150-tip pure-birth trees with a 2-state trait (models equal and
unconstrained) and 200-tip trees with a 4-state trait (equal and symmetric).
Per shape, --sets data sets (a new tree and trait each, seeded), simulated on the
given lengths (`null`: every treatment's optimum near its null value) and on unit
lengths (`unit`: kappa's and lambda's optimum far from it). Every data set is
fitted with every treatment (fit_model with the workflow's default starts and the
same seed), and the table shows, summed over the data sets: CPU time per fit
(time.process_time, the minimum of --repeat rounds, treatments interleaved), its
ratio to as_given, the objective evaluations per fit, the starts per fit, and how
many fits were flagged not converged. `unit` is a fixed treatment (the tree is transformed once). An
estimated treatment nests the given lengths, so its ln L should never be below
as_given's: the data sets where it is (by more than 1e-6) are counted, with the
largest shortfall.

CPU time, not wall time: the machine is shared, and CPU time is what the fit
itself spends. numba compilation is done before anything is timed.
"""

from __future__ import annotations

import os

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_var] = "1"

import argparse  # noqa: E402
import time  # noqa: E402

import numpy as np  # noqa: E402
from bench_mapping import pure_birth_tree  # noqa: E402

from mkforest.engine import gradient  # noqa: E402
from mkforest.engine.branches import ESTIMABLE, Treatment, transformed_tree  # noqa: E402
from mkforest.engine.fitting import fit_model  # noqa: E402
from mkforest.engine.models import build_model  # noqa: E402
from mkforest.engine.simulate import simulate_states, tip_partials_from_states  # noqa: E402
from mkforest.engine.treatment_search import TreatmentSpace  # noqa: E402

TREATMENTS = ("as_given", "unit", *ESTIMABLE)
SHAPES = {
    "150 tips x 2 states": (150, ("p", "q"), ("equal", "unconstrained"), 1.0),
    "200 tips x 4 states": (200, ("w", "x", "y", "z"), ("equal", "symmetric"), 0.7),
}
# data simulated on the given lengths, or on unit lengths (rate per branch)
SCENARIOS = {"null": (Treatment(), 1.0), "unit": (Treatment("unit"), 0.15)}

_calls = [0]
_inside = [False]
_plain = gradient.Evaluator.__call__
_objective = TreatmentSpace.objective


def _counted(self, *args, **kwargs):
    _calls[0] += not _inside[0]
    return _plain(self, *args, **kwargs)


def _counted_objective(self, z):
    _calls[0] += 1
    _inside[0] = True
    try:
        return _objective(self, z)
    finally:
        _inside[0] = False


# every objective evaluation of a fit's optimiser: the evaluator's, and the treatment
# objective's (one compiled call that does not go through the evaluator, or the
# evaluator). ln L alone (moving estimates onto bounds) is not counted, as for plain fits.
gradient.Evaluator.__call__ = _counted
TreatmentSpace.objective = _counted_objective


def data_sets(seed, n_sets, n_tips, states, truth, scale):
    """[(tree, tip partials, seed)]: equal-rates data with at least two states observed."""
    rng = np.random.default_rng(seed)
    model = build_model("equal", states)
    out = []
    while len(out) < n_sets:
        tree = pure_birth_tree(rng, n_tips, height=1.0, index=len(out))
        s = simulate_states(transformed_tree(tree, truth), model.q_matrix([scale]), rng)
        if len(set(s[:n_tips])) >= 2:
            out.append((tree, tip_partials_from_states(s, n_tips, len(states)), len(out)))
    return out


def measure(cases, model, repeat):
    """{treatment: (CPU seconds summed over cases, evaluations, starts, not converged,
    ln L list)}. Each fit's CPU time is its minimum over ``repeat`` rounds; within a
    round every treatment is fitted to one data set before the next data set, so a
    drift of the machine's speed falls on all treatments alike (one treatment
    after another moved the CPU ratios by up to 0.3 between runs)."""
    n = len(cases)
    best = {name: np.full(n, np.inf) for name in TREATMENTS}
    out = {}
    for _ in range(repeat):
        for i, (tree, X, seed) in enumerate(cases):
            for name in TREATMENTS:
                _calls[0] = 0
                t0 = time.process_time()
                res = fit_model(tree, X, model, seed=seed, branches=Treatment(name))
                best[name][i] = min(best[name][i], time.process_time() - t0)
                row = out.setdefault(name, [[0] * n, [0] * n, [0] * n, [0.0] * n])
                row[0][i], row[1][i] = _calls[0], res.n_starts
                row[2][i], row[3][i] = int(not res.converged), res.log_likelihood
    return {
        name: (float(best[name].sum()), sum(c), sum(st), sum(fl), list(ll))
        for name, (c, st, fl, ll) in out.items()
    }


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sets", type=int, default=10)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--seed", type=int, default=14)
    ap.add_argument(
        "--shape",
        choices=list(SHAPES),
        action="append",
        help="only this shape (repeatable; default both)",
    )
    args = ap.parse_args()
    warm = data_sets(0, 1, 20, ("p", "q"), Treatment(), 1.0)
    for name in TREATMENTS:
        fit_model(*warm[0][:2], build_model("equal", ("p", "q")), branches=Treatment(name))
    ratios = {name: [] for name in TREATMENTS}
    per_fit = {}  # (shape, scenario, model) -> as_given CPU per fit
    print(
        f"CPU ms per fit (minimum of {args.repeat} rounds), ratio to as_given, objective "
        f"evaluations and starts per fit, fits not converged; {args.sets} data sets each"
    )
    for shape in args.shape or SHAPES:
        n_tips, states, kinds, _ = SHAPES[shape]
        for scenario, (truth, scale) in SCENARIOS.items():
            cases = data_sets(
                [args.seed, n_tips, len(scenario)], args.sets, n_tips, states, truth, scale
            )
            for kind in kinds:
                model = build_model(kind, states)
                print(f"{shape}, {kind}, data simulated on {scenario} lengths")
                measured = measure(cases, model, args.repeat)
                base, base_calls, _, _, ref = measured["as_given"]
                per_fit[shape, scenario, kind] = (base, base_calls)
                for name in TREATMENTS:
                    cpu, calls, starts, flagged, lnl = measured[name]
                    ratios[name].append((cpu / base, calls / base_calls))
                    gaps = [b - a for a, b in zip(lnl, ref) if a < b - 1e-6]
                    n = len(cases)
                    print(
                        f"   {name:<12} {1e3 * cpu / n:8.1f} ms  x{cpu / base:5.2f}  "
                        f"{calls / n:6.1f} evals  {starts / n:4.1f} starts  "
                        f"{flagged} not converged  mean lnL {np.mean(lnl):10.3f}"
                        + (
                            f"  ({len(gaps)} below as_given, by up to {max(gaps):.2g})"
                            if name in ESTIMABLE and gaps
                            else ""
                        )
                    )
    print("geometric mean over the blocks above: CPU ratio to as_given, evaluations ratio")
    for name, r in ratios.items():
        cpu, ev = np.exp(np.mean(np.log(np.array(r)), axis=0))
        print(f"   {name:<12} x{cpu:5.2f} CPU   x{ev:5.2f} evaluations")
    # the same measure for one more free rate instead of a branch parameter: the 2-state
    # model with a rate per direction against the one with one rate, on the same data
    pairs = [
        (per_fit[sh, sc, "unconstrained"], per_fit[sh, sc, "equal"])
        for (sh, sc, kind) in per_fit
        if kind == "equal" and (sh, sc, "unconstrained") in per_fit
    ]
    if pairs:
        r = np.array([(a[0] / b[0], a[1] / b[1]) for a, b in pairs])
        cpu, ev = np.exp(np.mean(np.log(r), axis=0))
        print(
            "for comparison, one more free rate instead (2 states: unconstrained against "
            f"equal, given lengths):\n   {'2nd rate':<12} x{cpu:5.2f} CPU   x{ev:5.2f} "
            "evaluations"
        )


if __name__ == "__main__":
    main()
