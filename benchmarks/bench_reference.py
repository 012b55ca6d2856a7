"""A compiled reference fitter, timed side by side with mkforest's fits.

The reference is what a careful programmer writes in an afternoon: a numba
pruning loop (Felsenstein 1981) with P(t) in closed form for two states and
from numpy's eigen-decomposition otherwise, and scipy's L-BFGS-B on log-rates
with its own finite-difference gradient, from a fixed number of seeded starts
(default 3). It shares no code with mkforest. Both fitters see the same
simulated trees and data, in one process, alternating tree by tree, so a
change in machine load hits both alike.

Prints, per case: ms per fit and per start (CPU time of this process, and
wall), starts per fit, and how far each fitter's best ln L falls below the
other's (the quality of the optimum found).

    python benchmarks/bench_reference.py [--trees 40] [--reference-starts 3]
"""

from __future__ import annotations

import os

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_var] = "1"

import argparse  # noqa: E402
import math  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
from pathlib import Path  # noqa: E402

import numba  # noqa: E402
import numpy as np  # noqa: E402
from scipy.optimize import minimize  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_mapping import pure_birth_tree  # noqa: E402

from mkforest.engine.fitting import fit_model  # noqa: E402
from mkforest.engine.models import build_model  # noqa: E402
from mkforest.engine.simulate import simulate_states, tip_partials_from_states  # noqa: E402

# ---- the reference: its own kernels, no mkforest code ---------------------------------


@numba.njit(cache=True)
def _prune_two_state(child_ptr, children, n_tips, length, tips, a, b):
    """ln L, uniform root, two states: P00 = (b + a e^{-(a+b)t})/(a+b) etc."""
    n = child_ptr.shape[0] - 1
    part = np.empty((n, 2))
    log_scale = 0.0
    s = a + b
    for v in range(n_tips):
        part[v, 0] = tips[v, 0]
        part[v, 1] = tips[v, 1]
    for v in range(n_tips, n):
        x0 = 1.0
        x1 = 1.0
        for q in range(child_ptr[v], child_ptr[v + 1]):
            c = children[q]
            e = math.exp(-s * length[c])
            p01 = a / s * (1.0 - e)
            p10 = b / s * (1.0 - e)
            x0 *= (1.0 - p01) * part[c, 0] + p01 * part[c, 1]
            x1 *= p10 * part[c, 0] + (1.0 - p10) * part[c, 1]
        m = max(x0, x1)
        if m <= 0.0:
            return -np.inf
        part[v, 0] = x0 / m
        part[v, 1] = x1 / m
        log_scale += math.log(m)
    return math.log(0.5 * (part[n - 1, 0] + part[n - 1, 1])) + log_scale


@numba.njit(cache=True)
def _prune_matrices(child_ptr, children, n_tips, P, tips):
    """ln L, uniform root, any k, with P[node] = exp(Q t) given."""
    n = child_ptr.shape[0] - 1
    k = tips.shape[1]
    part = np.empty((n, k))
    log_scale = 0.0
    for v in range(n_tips):
        for i in range(k):
            part[v, i] = tips[v, i]
    for v in range(n_tips, n):
        for i in range(k):
            part[v, i] = 1.0
        for q in range(child_ptr[v], child_ptr[v + 1]):
            c = children[q]
            for i in range(k):
                x = 0.0
                for j in range(k):
                    x += P[c, i, j] * part[c, j]
                part[v, i] *= x
        m = 0.0
        for i in range(k):
            m = max(m, part[v, i])
        if m <= 0.0:
            return -np.inf
        for i in range(k):
            part[v, i] /= m
        log_scale += math.log(m)
    return math.log(part[n - 1].sum() / k) + log_scale


def reference_fit(tree, tips, k, free, n_starts=3, seed=0):
    """Best ln L over ``n_starts`` L-BFGS-B runs (finite-difference gradient).

    free: 'equal' (one rate) or 'unconstrained' (k(k-1) rates, row-major off-diagonal)."""
    p = 1 if free == "equal" else k * (k - 1)
    height = float(tree.height)
    lo, hi = math.log(1e-6 / height), math.log(1e4 / height)
    off = ~np.eye(k, dtype=bool)

    def loglik(x):
        r = np.exp(x)
        if k == 2:
            a, b = (r[0], r[0]) if p == 1 else (r[0], r[1])
            return _prune_two_state(
                tree.child_ptr, tree.children, tree.n_tips, tree.length, tips, a, b
            )
        Q = np.zeros((k, k))
        Q[off] = r[0] if p == 1 else r
        np.fill_diagonal(Q, -Q.sum(axis=1))
        lam, V = np.linalg.eig(Q)
        Vinv = np.linalg.inv(V)
        P = ((V[None, :, :] * np.exp(np.outer(tree.length, lam))[:, None, :]) @ Vinv).real
        return _prune_matrices(
            tree.child_ptr,
            tree.children,
            tree.n_tips,
            np.ascontiguousarray(np.maximum(P, 0.0)),
            tips,
        )

    def objective(x):
        ll = loglik(x)
        return -ll if np.isfinite(ll) else 1e8

    rng = np.random.default_rng(seed)
    guess = math.log(1.0 / height)
    best = math.inf
    for i in range(n_starts):
        x0 = np.full(p, guess) if i == 0 else np.clip(guess + rng.normal(0, 1.5, p), lo + 1, hi - 1)
        res = minimize(
            objective,
            x0,
            method="L-BFGS-B",
            bounds=[(lo, hi)] * p,
            options={"maxiter": 1000, "ftol": 1e-10, "gtol": 1e-6},
        )
        best = min(best, res.fun)
    return -best


def reference_fit_mask(tree, tips, mask, n_starts=3, seed=0):
    """Best ln L over ``n_starts`` L-BFGS-B runs (finite-difference gradient), uniform
    root, one free rate per True entry of the k x k ``mask`` (row-major), every other
    off-diagonal rate 0: e.g. the dependent model of two binary traits (8 rates on 4
    joint states, simultaneous changes forbidden)."""
    mask = np.asarray(mask, dtype=bool)
    k, p = mask.shape[0], int(mask.sum())
    height = float(tree.height)
    lo, hi = math.log(1e-6 / height), math.log(1e4 / height)

    def objective(x):
        Q = np.zeros((k, k))
        Q[mask] = np.exp(x)
        np.fill_diagonal(Q, -Q.sum(axis=1))
        lam, V = np.linalg.eig(Q)
        Vinv = np.linalg.inv(V)
        P = ((V[None, :, :] * np.exp(np.outer(tree.length, lam))[:, None, :]) @ Vinv).real
        ll = _prune_matrices(
            tree.child_ptr,
            tree.children,
            tree.n_tips,
            np.ascontiguousarray(np.maximum(P, 0.0)),
            tips,
        )
        return -ll if np.isfinite(ll) else 1e8

    rng = np.random.default_rng(seed)
    guess = math.log(1.0 / height)
    best = math.inf
    for i in range(n_starts):
        x0 = np.full(p, guess) if i == 0 else np.clip(guess + rng.normal(0, 1.5, p), lo + 1, hi - 1)
        res = minimize(
            objective,
            x0,
            method="L-BFGS-B",
            bounds=[(lo, hi)] * p,
            options={"maxiter": 1000, "ftol": 1e-10, "gtol": 1e-6},
        )
        best = min(best, res.fun)
    return -best


# ---- side by side ---------------------------------------------------------------------


def cases(rng, n, n_tips, k):
    states = tuple("wxyz"[:k])
    truth = build_model("unconstrained", states)
    out = []
    for i in range(n):
        tree = pure_birth_tree(rng, n_tips, index=i)
        s = simulate_states(tree, truth.q_matrix(rng.uniform(0.3, 1.5, truth.n_params)), rng)
        out.append((tree, tip_partials_from_states(s, tree.n_tips, k)))
    return states, out


def side_by_side(label, states, data, kind, ref_starts):
    k = len(states)
    model = build_model(kind, states)
    # compile both before timing (numba compiles each kernel once per argument type)
    for tree, X in data[:3]:
        fit_model(tree, X, model, seed=0)
        reference_fit(tree, X, k, kind, 1)
    ours = {"cpu": 0.0, "wall": 0.0, "starts": 0, "ll": []}
    ref = {"cpu": 0.0, "wall": 0.0, "starts": 0, "ll": []}
    for i, (tree, X) in enumerate(data):
        c0, w0 = time.process_time(), time.perf_counter()
        fit = fit_model(tree, X, model, seed=i)
        c1, w1 = time.process_time(), time.perf_counter()
        ll_ref = reference_fit(tree, X, k, kind, ref_starts, seed=i)
        c2, w2 = time.process_time(), time.perf_counter()
        ours["cpu"] += c1 - c0
        ours["wall"] += w1 - w0
        ours["starts"] += fit.n_starts
        ours["ll"].append(fit.log_likelihood)
        ref["cpu"] += c2 - c1
        ref["wall"] += w2 - w1
        ref["starts"] += ref_starts
        ref["ll"].append(ll_ref)
    n = len(data)
    gap = np.array(ours["ll"]) - np.array(ref["ll"])
    print(f"{label} {kind}, {n} trees")
    for name, d in (("mkforest ", ours), ("reference", ref)):
        print(
            f"  {name} {1e3 * d['cpu'] / n:7.2f} ms CPU per fit ({1e3 * d['wall'] / n:7.2f} wall), "
            f"{d['starts'] / n:5.2f} starts, {1e3 * d['cpu'] / d['starts']:6.2f} ms CPU per start"
        )
    print(
        f"  ratio per fit (CPU) {ours['cpu'] / ref['cpu']:5.2f};  per start "
        f"{(ours['cpu'] / ours['starts']) / (ref['cpu'] / ref['starts']):5.2f}"
    )
    print(
        f"  ln L mkforest - reference: min {gap.min():+.2e}, max {gap.max():+.2e} "
        f"(trees where the reference is better by > 0.01: {(gap < -0.01).sum()}; "
        f"mkforest better by > 0.01: {(gap > 0.01).sum()})"
    )
    return ours["cpu"], ref["cpu"]


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--trees", type=int, default=40)
    ap.add_argument("--reference-starts", type=int, default=3)
    args = ap.parse_args()
    rng = np.random.default_rng(13)
    print(f"load average {os.getloadavg()[0]:.1f}")
    for n_tips, k, kinds in (
        (150, 2, ("equal", "unconstrained")),
        (200, 4, ("equal", "unconstrained")),
    ):
        states, data = cases(rng, args.trees, n_tips, k)
        for kind in kinds:
            side_by_side(f"{n_tips} tips x {k} states", states, data, kind, args.reference_starts)
    print(f"load average {os.getloadavg()[0]:.1f}")


if __name__ == "__main__":
    main()
