"""Compile the engine's numba kernels into their on-disk cache, once.

numba compiles a kernel on its first call in a process, for each kind of
argument (real or complex eigenvalues, reducible chains), and keeps the machine
code beside the source (``cache=True``). Without this step, every fit job of the
first run on a fresh installation compiles for itself (about 13 s of CPU each,
measured) and jobs running side by side compile the same code at once.
``make setup`` runs it; running it again is cheap (the cache is loaded).

    python -m mkforest.engine.warm
"""

from __future__ import annotations

import time

import numpy as np

from ..data.trees import parse_newick
from .ancestral import marginal_probabilities
from .fitting import fit_model
from .gradient import log_likelihood_and_gradient
from .likelihood import log_likelihood, transition_matrices
from .mapping import stochastic_maps
from .models import build_model

# a small tree with a polytomy and a zero-length branch: every branch of the kernels runs
_TREE = "((a:0.3,b:0.2,c:0.1):0.2,(d:0.0,(e:0.4,f:0.1):0.3):0.1);"


def warm() -> float:
    """Run every kernel once on each kind of argument; returns the seconds taken."""
    start = time.perf_counter()
    tree = parse_newick(_TREE)
    rng = np.random.default_rng(0)
    for k in (2, 3):
        states = tuple("xyz"[:k])
        X = np.eye(k)[rng.integers(0, k, tree.n_tips)]
        X[0] = 1.0  # a missing cell
        for kind in ("equal", "unconstrained"):
            model = build_model(kind, states)
            for root in ("uniform", "stationary", "data_weighted", states[0]):
                fit_model(tree, X, model, root, n_starts=1, max_starts=1)
        # complex eigenvalues: a fast one-way cycle
        if k == 3:
            cycle = np.array([[-3.0, 3.0, 0.01], [0.01, -3.01, 3.0], [3.0, 0.01, -3.01]])
            log_likelihood(tree, X, cycle)
            free = build_model("unconstrained", states)
            rates = np.empty(free.n_params)
            rates[free.rate_index[free.rate_index >= 0]] = cycle[free.rate_index >= 0]
            log_likelihood_and_gradient(tree, X, free, rates)
            transition_matrices(cycle, tree.length)
        # a reducible chain (irreversible loss): explicit matrices with exact zeros
        Q = np.zeros((k, k))
        Q[0, 1] = 1.0
        np.fill_diagonal(Q, -Q.sum(axis=1))
        fit_model(
            tree,
            X,
            build_model("custom", states, {f"{states[0]} -> {states[1]}": "loss"}),
            n_starts=1,
            max_starts=1,
        )
        Q = build_model("unconstrained", states).q_matrix(np.ones(k * (k - 1)))
        marginal_probabilities(tree, X, Q)
        stochastic_maps(tree, X, Q, 2, rng)
    return time.perf_counter() - start


def main() -> int:
    """Compile every kernel into the cache and say how long it took."""
    print(f"mkforest: numba kernels compiled and cached in {warm():.1f} s")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
