"""Cost of the all-pairs scan: per-fit CPU of the dependent model beside the compiled
reference fitter (bench_reference.py), and one tree's whole scan, extrapolated.

1. Dependent fits of binary pairs on simulated 100-tip trees: mkforest as the scan
   runs them (fit_model, started from the independent optimum among its seeded
   starts) and the reference (its own numba pruning, SciPy L-BFGS-B with a
   finite-difference gradient, 3 seeded starts), alternating pair by pair in one
   process. CPU per fit and per start; ln L gap between the two.
2. The whole scan of ``--traits`` binary traits on ``--trees`` trees of ``--tips``
   tips (each trait fitted once per tree, every pair's dependent fit), CPU measured;
   extrapolated to 100 trees on 2 cores and to 50 traits x 1,000 trees on 200 cores
   (plus job start-up, ~1 s CPU per job: DEVELOPERS.md). Extrapolations are labelled.

    python benchmarks/bench_scan.py [--fits 30] [--traits 30] [--trees 1] [--tips 100]
"""

from __future__ import annotations

import os

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_var] = "1"

import argparse  # noqa: E402
import itertools  # noqa: E402
import math  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_mapping import pure_birth_tree  # noqa: E402
from bench_reference import reference_fit_mask  # noqa: E402

from mkforest.data.traits import Trait  # noqa: E402
from mkforest.engine import scan  # noqa: E402
from mkforest.engine.fitting import fit_model  # noqa: E402
from mkforest.engine.pairs import hypothesis_model, make_pair  # noqa: E402
from mkforest.engine.simulate import simulate_states  # noqa: E402
from mkforest.jobs.scan_plan import MAX_AUTO_JOBS, PAIRS_PER_JOB  # noqa: E402


def binary_trait(rng, tree, name):
    a, b = rng.uniform(0.3, 1.5, 2)
    s = simulate_states(tree, np.array([[-a, a], [b, -b]]), rng)[: tree.n_tips]
    possible = np.zeros((tree.n_tips, 2), dtype=bool)
    possible[np.arange(tree.n_tips), s] = True
    return Trait(name, ("0", "1"), tuple(tree.tip_labels), possible)


def per_fit(rng, n_fits, n_tips):
    ours = {"cpu": 0.0, "starts": 0}
    ref = {"cpu": 0.0, "starts": 0}
    gaps = []
    mask = None
    for i in range(n_fits + 2):  # the first two compile and are not counted
        tree = pure_birth_tree(rng, n_tips, index=i)
        a, b = binary_trait(rng, tree, "a"), binary_trait(rng, tree, "b")
        pair = make_pair("a~b", a, b)
        dep = hypothesis_model(pair, "dependent")
        mask = dep.rate_index >= 0
        X = pair.joint_trait().tip_partials(tree)
        s1, s2 = (scan.fit_single(tree, t, seed=i) for t in (a, b))
        start = scan.rates_from_q(dep, scan.independent_q(s1.q_matrix, s2.q_matrix))
        c0 = time.process_time()
        fit = fit_model(tree, X, dep, seed=i, first_starts=(start,))
        c1 = time.process_time()
        # the reference's rates in row-major mask order, the same Q
        ll_ref = reference_fit_mask(tree, X, mask, 3, seed=i)
        c2 = time.process_time()
        if i < 2:
            continue
        ours["cpu"] += c1 - c0
        ours["starts"] += fit.n_starts
        ref["cpu"] += c2 - c1
        ref["starts"] += 3
        gaps.append(fit.log_likelihood - ll_ref)
    gaps = np.array(gaps)
    print(f"dependent model, binary pairs, {n_tips} tips, {n_fits} fits")
    for name, d in (("mkforest ", ours), ("reference", ref)):
        print(
            f"  {name} {1e3 * d['cpu'] / n_fits:7.2f} ms CPU per fit, "
            f"{d['starts'] / n_fits:5.2f} starts, {1e3 * d['cpu'] / d['starts']:6.2f} ms per start"
        )
    print(
        f"  ratio per fit (CPU) {ours['cpu'] / ref['cpu']:5.2f};  per start "
        f"{(ours['cpu'] / ours['starts']) / (ref['cpu'] / ref['starts']):5.2f}"
    )
    print(
        f"  ln L mkforest - reference: min {gaps.min():+.2e}, max {gaps.max():+.2e} "
        f"(reference better by > 0.01 on {(gaps < -0.01).sum()}, mkforest on {(gaps > 0.01).sum()})"
    )
    return ours["cpu"] / n_fits


def whole_scan(rng, n_traits, n_trees, n_tips):
    single_cpu = pair_cpu = 0.0
    n_pairs = n_traits * (n_traits - 1) // 2
    for t in range(n_trees):
        tree = pure_birth_tree(rng, n_tips, index=100 + t)
        traits = [binary_trait(rng, tree, f"t{i:02d}") for i in range(n_traits)]
        c0 = time.process_time()
        singles = [scan.single_from_result(scan.fit_single(tree, x, seed=t)) for x in traits]
        c1 = time.process_time()
        for i, j in itertools.combinations(range(n_traits), 2):
            scan.test_pair(tree, traits[i], traits[j], (singles[i], singles[j]), seed=t)
        c2 = time.process_time()
        single_cpu += c1 - c0
        pair_cpu += c2 - c1
    per_tree = (single_cpu + pair_cpu) / n_trees
    per_single = single_cpu / n_trees / n_traits
    per_pair = pair_cpu / n_trees / n_pairs
    print(
        f"whole scan, {n_traits} traits ({n_pairs} pairs) x {n_trees} tree(s) x {n_tips} tips "
        f"(measured): {per_tree:.1f} s CPU per tree; {1e3 * per_single:.1f} ms per single "
        f"fit, {1e3 * per_pair:.1f} ms per pair (its dependent fit and test)"
    )
    jobs = max(1, min(MAX_AUTO_JOBS, math.ceil(n_pairs / PAIRS_PER_JOB)))
    cpu_100 = 100 * per_tree + (1 + jobs) * 1.0 + 2 * 1.0
    print(
        f"  EXTRAPOLATED to 100 trees on 2 cores: {cpu_100:.0f} s CPU, about "
        f"{cpu_100 / 2 / 60:.1f} min wall if both cores are free ({1 + jobs} scan jobs per "
        "chunk, one chunk of 100 trees)"
    )
    p50 = 50 * 49 // 2
    cpu_big = 1000 * (50 * per_single + p50 * per_pair)
    print(
        f"  EXTRAPOLATED to 50 traits ({p50} pairs) x 1,000 trees: {cpu_big / 3600:.1f} CPU "
        f"hours; on 200 cores with trees.per_job 250 (4 chunks) and scan.jobs_per_chunk 50: "
        f"{4 * 51 + 2} jobs, each about {cpu_big / 200 / 60:.0f} min "
        f"(about {cpu_big / 200 / 60 + 1:.0f} min wall with start-up)"
    )


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--fits", type=int, default=30)
    ap.add_argument("--traits", type=int, default=30)
    ap.add_argument("--trees", type=int, default=1)
    ap.add_argument("--tips", type=int, default=100)
    args = ap.parse_args()
    rng = np.random.default_rng(24)
    print(f"load average {os.getloadavg()[0]:.1f}")
    per_fit(rng, args.fits, args.tips)
    whole_scan(rng, args.traits, args.trees, args.tips)
    print(f"load average {os.getloadavg()[0]:.1f}")


if __name__ == "__main__":
    main()
