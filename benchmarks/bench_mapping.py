"""Benchmark: ancestral states and stochastic maps over a sample of trees.

Default workload: 1,000 random pure-birth trees of 200 tips, a three-state trait
simulated on each, and for every tree the marginal ancestral probabilities plus
100 stochastic maps under the unconstrained rate matrix. For scale, it also
times maximum-likelihood fits of two models on the first trees.

    .venv/bin/python benchmarks/bench_mapping.py [--trees 1000] [--tips 200] [--maps 100]

Prints seconds per tree for each step (numba compilation is done, and timed,
before the measured loop).
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from mkforest.data.trees import TreeArrays, _build
from mkforest.engine.ancestral import marginal_probabilities
from mkforest.engine.fitting import fit_model
from mkforest.engine.mapping import stochastic_maps
from mkforest.engine.models import build_model
from mkforest.engine.simulate import simulate_states, tip_partials_from_states


def pure_birth_tree(rng, n_tips: int, height: float = 1.0, index: int = 0) -> TreeArrays:
    """A Yule tree scaled to the given root-to-tip height, tips first, then internal nodes in postorder."""
    parent = [-1]
    birth = [0.0]
    death = [None]
    active = [0]
    t = 0.0
    while len(active) < n_tips:
        t += rng.exponential(1.0 / len(active))
        v = active.pop(int(rng.integers(len(active))))
        death[v] = t
        for _ in range(2):
            parent.append(v)
            birth.append(t)
            death.append(None)
            active.append(len(parent) - 1)
    t += rng.exponential(1.0 / len(active))
    for v in active:
        death[v] = t
    n = len(parent)
    kids = [[] for _ in range(n)]
    for v in range(1, n):
        kids[parent[v]].append(v)
    tips = [v for v in range(n) if not kids[v]]
    inner = []
    stack = [(0, False)]
    while stack:  # postorder of the internal nodes
        v, done = stack.pop()
        if not kids[v]:
            continue
        if done:
            inner.append(v)
        else:
            stack.append((v, True))
            stack.extend((c, False) for c in kids[v])
    new = {v: i for i, v in enumerate(tips + inner)}
    par = np.full(n, -1, dtype=np.int64)
    lens = np.zeros(n)
    for v in range(1, n):
        par[new[v]] = new[parent[v]]
        lens[new[v]] = (death[v] - birth[v]) / t * height
    return _build([f"sp{i}" for i in range(len(tips))], par, lens, index)


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--trees", type=int, default=1000)
    ap.add_argument("--tips", type=int, default=200)
    ap.add_argument("--maps", type=int, default=100)
    ap.add_argument("--fit-trees", type=int, default=20, help="trees on which fits are timed")
    args = ap.parse_args()

    rng = np.random.default_rng(2024)
    states = ("low", "mid", "high")
    model = build_model("unconstrained", states)
    equal = build_model("equal", states)
    true_rates = np.array([0.8, 0.3, 0.5, 0.9, 0.2, 0.6]) * 2.0
    Q = model.q_matrix(true_rates)

    t0 = time.perf_counter()
    trees, data = [], []
    for i in range(args.trees):
        tree = pure_birth_tree(rng, args.tips, index=i)
        s = simulate_states(tree, Q, rng)
        trees.append(tree)
        data.append(tip_partials_from_states(s, tree.n_tips, 3))
    t_make = time.perf_counter() - t0

    t0 = time.perf_counter()
    marginal_probabilities(trees[0], data[0], Q, "uniform")
    stochastic_maps(trees[0], data[0], Q, 2, np.random.default_rng(0), "uniform")
    t_compile = time.perf_counter() - t0

    t0 = time.perf_counter()
    for tree, d in zip(trees, data):
        marginal_probabilities(tree, d, Q, "uniform")
    t_marg = time.perf_counter() - t0

    t0 = time.perf_counter()
    changes = 0.0
    for tree, d in zip(trees, data):
        maps = stochastic_maps(tree, d, Q, args.maps, np.random.default_rng(tree.index), "uniform")
        changes += maps.n_changes.mean()
    t_maps = time.perf_counter() - t0

    n_fit = min(args.fit_trees, len(trees))
    fit_times = {}
    for m in (equal, model):
        fit_model(trees[0], data[0], m, "uniform", seed=0)  # compile
        t0 = time.perf_counter()
        for tree, d in zip(trees[:n_fit], data[:n_fit]):
            fit_model(tree, d, m, "uniform", seed=tree.index)
        fit_times[m.kind] = (time.perf_counter() - t0) / n_fit

    n = len(trees)
    print(
        f"workload: {n} trees x {args.tips} tips, 3 states, {args.maps} maps per tree "
        f"(mean {changes / n:.1f} changes per map)"
    )
    print(f"making trees and data            {t_make:8.2f} s")
    print(f"numba compile / first call       {t_compile:8.2f} s")
    print(
        f"marginal probabilities           {t_marg:8.2f} s total  {1e3 * t_marg / n:8.2f} ms per tree"
    )
    print(
        f"stochastic maps ({args.maps:>4} per tree)   {t_maps:8.2f} s total  "
        f"{1e3 * t_maps / n:8.2f} ms per tree  {1e6 * t_maps / (n * args.maps):8.1f} us per map"
    )
    for kind, secs in fit_times.items():
        print(f"fit '{kind}' (mean of {n_fit} trees) {1e3 * secs:12.1f} ms per tree")


if __name__ == "__main__":
    main()
