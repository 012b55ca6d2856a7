"""Simulate a trait down a tree under a rate matrix (seeded)."""

from __future__ import annotations

import numpy as np

from .likelihood import stationary_distribution, transition_matrices


def simulate_states(tree, Q, rng, root_state=None, root_weights=None) -> np.ndarray:
    """States at every node (int64 [n_nodes]; tips are 0..n_tips-1).

    The root state is ``root_state`` if given, else drawn from ``root_weights``
    (default: the stationary distribution of Q). Each child's state is drawn from
    row parent-state of P(t) = exp(Qt) for its branch.
    """
    Q = np.asarray(Q, dtype=np.float64)
    k = Q.shape[0]
    P = transition_matrices(Q, tree.length)
    cum = np.cumsum(P, axis=2)
    cum[:, :, -1] = 1.0
    states = np.empty(tree.n_nodes, dtype=np.int64)
    if root_state is None:
        w = stationary_distribution(Q) if root_weights is None else np.asarray(root_weights, float)
        root_state = int(rng.choice(k, p=w / w.sum()))
    states[tree.root] = root_state
    u = rng.random(tree.n_nodes)
    for v in range(tree.n_nodes - 2, -1, -1):
        row = cum[v, states[tree.parent[v]]]
        states[v] = int(np.searchsorted(row, u[v], side="right"))
    return np.minimum(states, k - 1)


def tip_partials_from_states(states, n_tips: int, k: int) -> np.ndarray:
    """One-hot tip data [n_tips, k] from simulated node states."""
    out = np.zeros((n_tips, k))
    out[np.arange(n_tips), states[:n_tips]] = 1.0
    return out
