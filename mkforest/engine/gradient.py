"""Exact gradient of the log-likelihood with respect to the log-rates, for the optimiser.

The passes and their mathematics are in ``kernels``; here the root treatments and
the fall-backs. Root treatments: uniform and a fixed state start the up pass from
their fixed weights. Conditional (L = sum L_i^2 / sum L_i, FitzJohn, Maddison & Otto
2009) starts it from dL/dL_root,i = (2 L_i - L) / sum_j L_j: the chain rule through
the root vector. Equilibrium adds d pi / dtheta . L_root / L, with d pi from
d pi Q = -pi dQ and sum d pi = 0, i.e. d pi = -pi dQ (Q - 1 pi)^-1 (the matrix
is invertible when the chain has one closed class; standard result).

Where the engine itself leaves the eigen-decomposition (ill-conditioned or
defective Q, see ``likelihood.eigensystem``), and for the stationary root of a
reducible chain, the gradient is taken by central finite differences of the
engine's ``log_likelihood`` instead.
"""

from __future__ import annotations

import numpy as np

from .kernels import (
    IMPOSSIBLE,
    NOT_THIS_PATH,
    USE_DIFFERENCES,
    evaluate_rates,
    value_and_gradient,
)
from .likelihood import (
    eigensystem,
    expm1_complex,
    expm1_real,
    log_likelihood,
    reachable,
    root_weights,
    stationary_distribution,
)

_ONE = np.ones(1)
# Step (in log-rate) of the central finite differences used where the analytic
# gradient does not apply: about the cube root of the machine epsilon.
FD_STEP = 1e-5


def finite_difference_gradient(
    tree, tip_partials, model, rates, root="uniform", states=None, step: float = FD_STEP
):
    """(lnL, d lnL / d log-rate) with central differences of ``likelihood.log_likelihood``
    (one-sided where one side is impossible; 0 where both are)."""
    rates = np.asarray(rates, dtype=np.float64)
    ll = log_likelihood(tree, tip_partials, model.q_matrix(rates), root, states)
    grad = np.zeros(model.n_params)
    if not np.isfinite(ll):
        return ll, grad
    x = np.log(rates)
    for p in range(model.n_params):
        side = []
        for h in (step, -step):
            y = x.copy()
            y[p] += h
            side.append(log_likelihood(tree, tip_partials, model.q_matrix(np.exp(y)), root, states))
        up, down = side
        if np.isfinite(up) and np.isfinite(down):
            grad[p] = (up - down) / (2.0 * step)
        elif np.isfinite(up):
            grad[p] = (up - ll) / step
        elif np.isfinite(down):
            grad[p] = (ll - down) / step
    return ll, grad


def _analytic_eigensystem(Q, root):
    """The engine's eigensystem of Q when the gradient is taken analytically, else None."""
    es = eigensystem(Q)
    if es is None or (root == "stationary" and not reachable(Q).all()):
        return None
    return es


def exact_gradient_applies(Q, root) -> bool:
    """True when ``log_likelihood_and_gradient`` differentiates analytically at Q
    (well-conditioned eigenvectors; for the stationary root also an irreducible
    chain); otherwise it takes central finite differences. (It also falls back if
    the up pass underflows, which needs likelihood ratios beyond 1e-300 between
    the states of one node.)"""
    return _analytic_eigensystem(np.asarray(Q, dtype=np.float64), root) is not None


class Evaluator:
    """(lnL, d lnL / d log-rate, d lnL / d branch length) of one model on one tree's
    topology and data, at many rate vectors (and branch lengths): what an optimiser
    calls. It keeps the fixed parts (contiguous tip data, root weights, buffers)
    from call to call; the values are those of ``log_likelihood_and_gradient``.

    ``__call__(rates, length=None)``: length [n_nodes] replaces the tree's branch
    lengths for this call. The third item is None where the gradient falls back
    to finite differences; it is a buffer that the next call overwrites."""

    def __init__(self, tree, tip_partials, model, root="uniform", states=None):
        self.tree, self.model, self.root = tree, model, root
        self.states = model.states if states is None else states
        self.tips = np.ascontiguousarray(tip_partials, dtype=np.float64)
        k, n = model.k, tree.n_nodes
        self.stationary = root == "stationary"
        self.data_weighted = root == "data_weighted"
        # uniform and fixed-state roots: weights that do not depend on Q
        self.weights = (
            _ONE
            if self.data_weighted
            else None
            if self.stationary
            else root_weights(root, np.zeros((k, k)), None, self.states)
        )
        self.E1 = {False: np.empty((n, k)), True: np.empty((n, k), dtype=np.complex128)}
        self.root_partial = np.empty(k)
        self.grad = np.empty(model.n_params)
        self.dlen = np.empty(n)
        # the one-call path (``kernels.evaluate_rates``): roots whose weights do not depend on Q
        self.fused = not self.stationary and k <= 128
        self.Q = np.empty((k, k))
        self.base = model.q_matrix(np.zeros(model.n_params))
        self.work = (self.Q, self.E1[False], self.E1[True], self.root_partial, self.grad, self.dlen)
        self.data = self.data_with(self.weights)

    def data_with(self, weights):
        """The kernels' data bundle with these root weights."""
        return (self.model.rate_index, self.base, self.tips, self.data_weighted, weights)

    def __call__(self, rates, length=None):
        rates = np.asarray(rates, dtype=np.float64)
        tree = self.tree
        length = tree.length if length is None else length
        status, Q = NOT_THIS_PATH, None
        arrays = (tree.child_ptr, tree.children, tree.n_tips, length)
        if self.fused:
            status, ll = evaluate_rates(rates, arrays, self.data, self.work)
        if status == NOT_THIS_PATH:  # a stationary root, or an ill-conditioned or defective Q
            Q = self.model.q_matrix(rates)
            es = _analytic_eigensystem(Q, self.root)
            if es is None:
                return self._finite_differences(rates, length)
            lam, V, Vinv = es
            weights = stationary_distribution(Q) if self.stationary else self.weights
            complex_ = lam.dtype == np.complex128
            E1 = self.E1[complex_]
            (expm1_complex if complex_ else expm1_real)(length, lam, E1)
            status, ll = value_and_gradient(
                arrays, (Q, lam, V, Vinv, E1), self.data_with(weights), self.work
            )
        if status == IMPOSSIBLE:
            self.dlen[:] = 0.0
            return -np.inf, np.zeros(self.model.n_params), self.dlen
        if status == USE_DIFFERENCES:
            return self._finite_differences(rates, length)
        grad = self.grad
        if self.stationary:
            # d pi = -pi dQ (Q - 1 pi)^-1, so d pi . L_root / L = -pi dQ z with
            # z = (Q - 1 pi)^-1 L_root / L (root_partial is already L_root / L)
            z = np.linalg.solve(Q - weights[None, :], self.root_partial)
            M = -weights[:, None] * (z[None, :] - z[:, None])
            free = self.model.rate_index >= 0
            grad = grad + np.bincount(
                self.model.rate_index[free], weights=M[free], minlength=self.model.n_params
            )
        return ll, grad * rates, self.dlen

    def _finite_differences(self, rates, length):
        tree = self.tree if length is self.tree.length else self.tree.with_lengths(length)
        return (
            *finite_difference_gradient(tree, self.tips, self.model, rates, self.root, self.states),
            None,
        )


def log_likelihood_and_gradient(
    tree, tip_partials, model, rates, root="uniform", states=None, lengths_gradient: bool = False
):
    """(lnL, d lnL / d log(rate_p) for every free rate p) of ``model`` at ``rates``.

    lnL is the engine's ``likelihood.log_likelihood`` (same kernels; equal to
    rounding); -inf (with a zero gradient) when the data are impossible under
    the rates. ``states`` names the states for a fixed-state root (default: the
    model's). With ``lengths_gradient`` a third item, d lnL / d t_b for every
    branch [n_nodes], or None where the gradient falls back to finite differences.
    """
    ll, grad, dlen = Evaluator(tree, tip_partials, model, root, states)(rates)
    return (ll, grad, dlen) if lengths_gradient else (ll, grad)
