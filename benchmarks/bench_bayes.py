"""Benchmark: the Bayesian room's sampler and its cost per tree.

    .venv/bin/python benchmarks/bench_bayes.py [--trees 3] [--skip-mici] [--skip-four]

Sections:
1. samplers on the same log density (binary unconstrained model, 150-tip pure-birth
   trees, data simulated at 1 and 2 changes along the height; exponential prior,
   mean 1): nutpie's NUTS (diagonal mass matrix; and its low-rank variant) against
   mici's dynamic multinomial HMC (NUTS-like, dual-averaging step size, online
   variance metric), 4 chains, warm-up + draws as listed: CPU seconds (process time,
   all threads), the smallest bulk ESS over the two rates, and that ESS per CPU second;
2. ``sample_posterior`` end to end (sampler, diagnostics, bridge sampling) on the same
   trees at four settings: CPU per tree and the smallest bulk ESS (mean over trees,
   and the worst tree);
3. 4-state unconstrained (12 rates) on 200-tip trees: CPU per tree at the defaults.

numba kernels are compiled and nutpie imported before anything is timed; every figure
is one run per tree (the machine is shared: CPU time, not wall time).
"""

from __future__ import annotations

import os

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_var] = "1"

import argparse  # noqa: E402
import time  # noqa: E402

import arviz as az  # noqa: E402
import numpy as np  # noqa: E402
from bench_mapping import pure_birth_tree  # noqa: E402

from mkforest.engine.bayes import Prior, sample_posterior  # noqa: E402
from mkforest.engine.bayes.density import LogPosterior  # noqa: E402
from mkforest.engine.bayes.sampler import run_chains  # noqa: E402
from mkforest.engine.models import build_model  # noqa: E402
from mkforest.engine.simulate import simulate_states, tip_partials_from_states  # noqa: E402


def case(seed, n_tips, model, scaled_rates):
    rng = np.random.default_rng(seed)
    tree = pure_birth_tree(rng, n_tips)
    rates = np.asarray(scaled_rates) / tree.height
    s = simulate_states(tree, model.q_matrix(rates), rng)
    return tree, tip_partials_from_states(s, tree.n_tips, model.k)


def min_bulk(z):
    data = az.convert_to_dataset({"z": z})
    return float(np.min(az.ess(data, method="bulk")["z"].values))


def nutpie_run(density, n, warmup, draws, seed, low_rank=False):
    starts = np.array([density.start(np.random.default_rng([seed, c])) for c in range(4)])
    t = time.process_time()
    z, _, _ = run_chains(density, n, starts, 4, warmup, draws, seed, low_rank=low_rank)
    return time.process_time() - t, min_bulk(z)


def mici_run(density, n, warmup, draws, seed):
    import mici

    def nld(x):
        return -density(x)[0]

    def gnld(x):
        v, g = density(x)
        return -g, -v

    system = mici.systems.EuclideanMetricSystem(neg_log_dens=nld, grad_neg_log_dens=gnld)
    integrator = mici.integrators.LeapfrogIntegrator(system)
    sampler = mici.samplers.DynamicMultinomialHMC(system, integrator, np.random.default_rng(seed))
    starts = [density.start(np.random.default_rng([seed, c])) for c in range(4)]
    t = time.process_time()
    _, traces, _ = sampler.sample_chains(
        warmup,
        draws,
        starts,
        adapters=[
            mici.adapters.DualAveragingStepSizeAdapter(0.8),
            mici.adapters.OnlineVarianceMetricAdapter(),
        ],
        n_process=1,
        display_progress=False,
    )
    return time.process_time() - t, min_bulk(np.asarray(traces["pos"]))


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--trees", type=int, default=3)
    ap.add_argument("--skip-mici", action="store_true")
    ap.add_argument("--skip-four", action="store_true")
    args = ap.parse_args()
    binary = build_model("unconstrained", ("a", "b"))
    cases = [case(100 + i, 150, binary, [1.0, 2.0]) for i in range(args.trees)]
    # compile and import before timing
    sample_posterior(*cases[0], binary, chains=2, warmup=50, draws=50)

    print("1. samplers, binary unconstrained, 150 tips, 4 chains (per tree; mean over trees)")
    print(f"{'sampler':<22}{'warm-up+draws':>14}{'CPU s':>8}{'min ESS':>9}{'ESS/CPU s':>11}")
    runs = [("nutpie diag", 500, 500), ("nutpie diag", 300, 300), ("nutpie low-rank", 300, 300)]
    if not args.skip_mici:
        runs += [("mici multinomial HMC", 500, 500), ("mici multinomial HMC", 300, 300)]
    for name, warmup, draws in runs:
        cpu, ess = [], []
        for i, (tree, X) in enumerate(cases):
            density = LogPosterior(tree, X, binary, "uniform", None, Prior())
            if name.startswith("mici"):
                c, e = mici_run(density, 2, warmup, draws, i)
            else:
                c, e = nutpie_run(density, 2, warmup, draws, i, low_rank="low" in name)
            cpu.append(c)
            ess.append(e)
        cpu, ess = np.mean(cpu), np.mean(ess)
        print(f"{name:<22}{warmup:>7}+{draws:<6}{cpu:>8.2f}{ess:>9.0f}{ess / cpu:>11.0f}")

    print("\n2. sample_posterior end to end (sampler + ArviZ diagnostics + bridge sampling)")
    print(f"{'warm-up+draws':>14}{'CPU s/tree':>12}{'min ESS':>9}{'worst tree ESS':>15}")
    for warmup, draws in ((500, 500), (300, 300), (200, 300), (150, 250)):
        cpu, ess = [], []
        for i, (tree, X) in enumerate(cases):
            t = time.process_time()
            post = sample_posterior(tree, X, binary, warmup=warmup, draws=draws, seed=i)
            cpu.append(time.process_time() - t)
            ess.append(float(post.ess_bulk.min()))
        print(f"{warmup:>7}+{draws:<6}{np.mean(cpu):>12.2f}{np.mean(ess):>9.0f}{min(ess):>15.0f}")

    if not args.skip_four:
        print("\n3. 4-state unconstrained (12 rates), 200 tips, defaults (4 x (500 + 500))")
        four = build_model("unconstrained", ("w", "x", "y", "z"))
        rng = np.random.default_rng(7)
        for i in range(min(args.trees, 2)):
            tree, X = case(200 + i, 200, four, np.exp(rng.normal(0.0, 0.3, 12)))
            t = time.process_time()
            post = sample_posterior(tree, X, four, seed=i)
            cpu = time.process_time() - t
            print(
                f"tree {i}: CPU {cpu:.1f} s, bulk ESS min {post.ess_bulk.min():.0f}, "
                f"R-hat max {post.r_hat.max():.3f}, divergences {post.divergences}, "
                f"ln ML {post.log_marginal_likelihood:.2f} +- {post.mc_error:.3f}"
            )


if __name__ == "__main__":
    main()
