"""Calibration and power of the all-pairs scan (not a timed test).

null:  every trait independent. Each replicate is a new pure-birth tree with
       ``--traits`` binary traits simulated on it, each at its own random rates; the
       scan tests every pair (independent against dependent, chi-square on 4 df) and
       applies Benjamini-Hochberg at ``--level`` across the pairs. Every discovery is
       false, so a replicate's false-discovery proportion is 1 when it has any
       discovery and 0 otherwise; its average over replicates must be at most the
       level within Monte Carlo error (Benjamini & Hochberg 1995: under the complete
       null the procedure holds the chance of any rejection at the level, for
       independent or positively dependent tests). Also printed: the share of single
       tests with p <= 0.05 (the chi-square reference itself).
power: ``--planted`` pairs simulated together under a dependent model (the second
       trait is gained fast and lost slowly only while the first is present), the
       other traits independent; at each of ``--tips``: the share of planted pairs
       discovered per tree, and the false-discovery proportion among the rest.

    python benchmarks/scan_calibration.py null --traits 20 --replicates 100 --tips 60
    python benchmarks/scan_calibration.py power --traits 10 --replicates 20 --tips 60 150 300
"""

from __future__ import annotations

import os

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_var] = "1"

import argparse  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_mapping import pure_birth_tree  # noqa: E402

from mkforest.data.traits import Trait  # noqa: E402
from mkforest.engine import scan  # noqa: E402
from mkforest.engine.fdr import bh_adjusted  # noqa: E402
from mkforest.engine.simulate import simulate_states  # noqa: E402

# planted dependence on joint states (first, second) = 00, 01, 10, 11 (per tree height)
PLANTED_Q = np.array(
    [
        # second gained slowly / lost fast while the first is absent
        [0.0, 0.2, 0.6, 0.0],
        [3.0, 0.0, 0.0, 0.6],
        # second gained fast / lost slowly while the first is present
        [0.6, 0.0, 0.0, 3.0],
        [0.0, 0.6, 0.2, 0.0],
    ]
)
np.fill_diagonal(PLANTED_Q, -PLANTED_Q.sum(axis=1))


def trait_of(name, tree, states):
    possible = np.zeros((tree.n_tips, 2), dtype=bool)
    possible[np.arange(tree.n_tips), states[: tree.n_tips]] = True
    return Trait(name, ("0", "1"), tuple(tree.tip_labels), possible)


def simulate(rng, tree, n_traits, n_planted):
    traits = []
    for p in range(n_planted):
        joint = simulate_states(tree, PLANTED_Q, rng)
        traits += [trait_of(f"p{p}a", tree, joint // 2), trait_of(f"p{p}b", tree, joint % 2)]
    while len(traits) < n_traits:
        a, b = rng.uniform(0.3, 1.5, 2)
        s = simulate_states(tree, np.array([[-a, a], [b, -b]]), rng)
        traits.append(trait_of(f"i{len(traits)}", tree, s))
    return traits


def one_replicate(rng, r, n_traits, n_tips, n_planted, level):
    tree = pure_birth_tree(rng, n_tips, index=r)
    traits = simulate(rng, tree, n_traits, n_planted)
    singles = [scan.single_from_result(scan.fit_single(tree, t, seed=r)) for t in traits]
    names, p = [], []
    for i in range(n_traits):
        for j in range(i + 1, n_traits):
            (row,) = scan.test_pair(tree, traits[i], traits[j], (singles[i], singles[j]), seed=r)
            names.append((traits[i].name, traits[j].name))
            p.append(row["p_value"])
    p = np.array(p)
    found = bh_adjusted(p) <= level
    planted = np.array([a[:-1] == b[:-1] and a.startswith("p") for a, b in names])
    # false pairs with a trait of a planted pair: that trait's own history is not a
    # Markov chain of its own (its rates depend on its partner), so both hypotheses of
    # such a pair are misspecified
    touches = np.array([a.startswith("p") or b.startswith("p") for a, b in names]) & ~planted
    return p, found, planted, touches


def null(args):
    rng = np.random.default_rng(2024)
    fdp, small, n_p = [], 0, 0
    c0 = time.process_time()
    for r in range(args.replicates):
        p, found, _, _ = one_replicate(rng, r, args.traits, args.tips[0], 0, args.level)
        fdp.append(1.0 if found.any() else 0.0)
        small += int((p <= 0.05).sum())
        n_p += p.size
    fdp = np.array(fdp)
    se = fdp.std(ddof=1) / np.sqrt(fdp.size) if fdp.size > 1 else np.nan
    n_pairs = args.traits * (args.traits - 1) // 2
    print(
        f"null: {args.traits} independent binary traits ({n_pairs} pairs), {args.tips[0]} "
        f"tips, {args.replicates} replicate trees, level {args.level}"
    )
    from scipy.stats import beta

    k = int(fdp.sum())
    upper = float(beta.ppf(0.975, k + 1, fdp.size - k))  # Clopper-Pearson (1934)
    print(
        f"  mean false-discovery proportion per tree {fdp.mean():.3f} (Monte Carlo SE "
        f"{se:.3f}; trees with any discovery: {k}; 95% upper limit {upper:.3f})"
    )
    print(f"  single tests with chi-square p <= 0.05: {small / n_p:.3f} of {n_p}")
    print(f"  CPU {time.process_time() - c0:.0f} s")


def power(args):
    rng = np.random.default_rng(2025)
    for n_tips in args.tips:
        share, fdp, near, far = [], [], 0, 0
        c0 = time.process_time()
        for r in range(args.replicates):
            _, found, planted, touches = one_replicate(
                rng, r, args.traits, n_tips, args.planted, args.level
            )
            share.append(found[planted].mean())
            fdp.append(found[~planted].sum() / max(1, found.sum()))
            near += int(found[touches].sum())
            far += int(found[~planted & ~touches].sum())
        share, fdp = np.array(share), np.array(fdp)
        se = fdp.std(ddof=1) / np.sqrt(fdp.size)
        print(
            f"power at {n_tips} tips ({args.traits} traits, {args.planted} planted pairs, "
            f"{args.replicates} trees): planted pairs found {share.mean():.2f} "
            f"(SE {share.std(ddof=1) / np.sqrt(share.size):.2f}); false-discovery proportion "
            f"{fdp.mean():.3f} (SE {se:.3f}); false discoveries with a planted trait {near}, "
            f"between two independent traits {far}; CPU {time.process_time() - c0:.0f} s"
        )


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("mode", choices=["null", "power"])
    ap.add_argument("--traits", type=int, default=20)
    ap.add_argument("--replicates", type=int, default=100)
    ap.add_argument("--tips", type=int, nargs="+", default=[60])
    ap.add_argument("--planted", type=int, default=3)
    ap.add_argument("--level", type=float, default=0.05)
    args = ap.parse_args()
    print(f"load average {os.getloadavg()[0]:.1f}")
    (null if args.mode == "null" else power)(args)
    print(f"load average {os.getloadavg()[0]:.1f}")


if __name__ == "__main__":
    main()
