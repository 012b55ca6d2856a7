"""Recovery of branch-length treatments by Akaike weights on simulated data.

    .venv/bin/python benchmarks/branch_recovery.py [--sets 50] [--tips 100]

Two scenarios, each on --sets data sets (a new pure-birth tree of height 1 and a
new binary trait per data set, equal rates, seeded):

  speciational  the trait simulated on unit branch lengths (kappa = 0), rate 0.3
                per branch;
  early burst   the trait simulated with the rate falling as e^(a s) along the
                tree, a H = -10 (a thousands-fold slowdown), rate 10 at the root.

Each data set is fitted with the equal-rates model on the given lengths, on unit
lengths, with an estimated kappa and with an estimated early burst (fit_model,
the workflow's default starts). Reported: on how many data sets the true
treatment (unit lengths, i.e. kappa = 0 without a parameter to pay for; the
early burst) carries the largest AICc weight, the median of its weight, how
often kappa or unit together carry more than half of it, and the estimates.
"""

from __future__ import annotations

import os

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_var] = "1"

import argparse  # noqa: E402
import time  # noqa: E402

import numpy as np  # noqa: E402
from bench_mapping import pure_birth_tree  # noqa: E402

from mkforest.engine.branches import Treatment, transformed_tree  # noqa: E402
from mkforest.engine.compare import akaike_weights, information_criteria  # noqa: E402
from mkforest.engine.fitting import fit_model  # noqa: E402
from mkforest.engine.models import build_model  # noqa: E402
from mkforest.engine.simulate import simulate_states, tip_partials_from_states  # noqa: E402

CANDIDATES = {
    "as_given": Treatment(),
    "unit": Treatment("unit"),
    "kappa": Treatment("kappa"),
    "early_burst": Treatment("early_burst"),
}
SCENARIOS = {
    "speciational (kappa = 0)": ("unit", Treatment("kappa", 0.0), 0.3),
    "early burst (a H = -10)": ("early_burst", Treatment("early_burst", -10.0), 10.0),
}


def one_data_set(rng, n_tips, truth: Treatment, rate, seed):
    """(weights by candidate, estimate of each candidate) for one simulated data set."""
    model = build_model("equal", ("p", "q"))
    tree = pure_birth_tree(rng, n_tips, height=1.0, index=seed)
    states = simulate_states(transformed_tree(tree, truth), model.q_matrix([rate]), rng)
    X = tip_partials_from_states(states, tree.n_tips, 2)
    if len(set(states[: tree.n_tips])) < 2:
        return None
    fits = {
        name: fit_model(tree, X, model, seed=seed, branches=t) for name, t in CANDIDATES.items()
    }
    aicc = [
        information_criteria(f.log_likelihood, f.n_params, tree.n_tips)["aicc"]
        for f in fits.values()
    ]
    return dict(zip(fits, akaike_weights(aicc))), {n: f.branch_parameter for n, f in fits.items()}


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sets", type=int, default=50)
    ap.add_argument("--tips", type=int, default=100)
    ap.add_argument("--seed", type=int, default=14)
    args = ap.parse_args()
    for label, (expected, truth, rate) in SCENARIOS.items():
        rng = np.random.default_rng([args.seed, len(label)])
        start = time.perf_counter()
        wins, weights, estimates, skipped, together = {}, [], [], 0, 0
        for i in range(args.sets):
            out = one_data_set(rng, args.tips, truth, rate, i)
            if out is None:
                skipped += 1
                continue
            w, est = out
            best = max(w, key=w.get)
            wins[best] = wins.get(best, 0) + 1
            weights.append(w[expected])
            estimates.append(est["kappa" if expected == "unit" else expected])
            if expected == "unit":
                together += (w["unit"] + w["kappa"]) > 0.5
        n = args.sets - skipped
        print(
            f"{label}: {args.tips} tips, {n} data sets ({skipped} without variation skipped), "
            f"{time.perf_counter() - start:.0f} s"
        )
        print("   largest weight: " + ", ".join(f"{k} {v}" for k, v in sorted(wins.items())))
        print(
            f"   true treatment '{expected}' best on {wins.get(expected, 0)} of {n}; median "
            f"weight {np.median(weights):.2f}; median estimate "
            + (
                f"of a {np.median(estimates):.3g} per unit of tree height"
                if expected == "early_burst"
                else f"of kappa {np.median(estimates):.3g}; unit + kappa weight above 0.5 on "
                f"{together} of {n}"
            )
        )


if __name__ == "__main__":
    main()
