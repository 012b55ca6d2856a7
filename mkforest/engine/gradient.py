"""Exact gradient of the log-likelihood with respect to the log-rates.

With Q = V diag(lam) V^-1 and P_b = exp(Q t_b), the derivative of P_b with
respect to a rate theta is (standard result for the derivative of the matrix
exponential through the eigen-decomposition; e.g. Kalbfleisch & Lawless 1985,
J. Am. Stat. Assoc. 80:863)

    dP_b/dtheta = V (F_b o (V^-1 dQ/dtheta V)) V^-1,
    F_b[m, n] = (exp(lam_m t) - exp(lam_n t)) / (lam_m - lam_n),  = t exp(lam_m t) if lam_m = lam_n,

where o is the elementwise product. With D_b the conditional likelihood below
node b (the down pass, Felsenstein 1981) and u_b the likelihood of everything
outside b's subtree per state of b's parent (the up pass, started from the
root weights), every branch satisfies u_b' P_b D_b = L, and

    d lnL / dtheta = sum_b u_b' dP_b D_b / (u_b' P_b D_b)
                   = sum_ij dQ_ij/dtheta (V^-T G V^T)_ij,
    G = sum_b ((V' u_b)(V^-1 D_b)') o F_b / (u_b' P_b D_b).

Dividing each branch by its own u_b' P_b D_b makes the sum free of the scale
factors of the passes, so the vectors need only be kept away from underflow
(each is normalised as it is made). G is k x k however many parameters there
are, so the whole gradient costs about as much as two or three likelihoods.

Root treatments: uniform and a fixed state start the up pass from their fixed
weights. Conditional (L = sum L_i^2 / sum L_i, FitzJohn, Maddison & Otto 2009)
starts it from dL/dL_root,i = (2 L_i - L) / sum_j L_j: the chain rule through
the root vector. Equilibrium adds d pi / dtheta . L_root / L, with d pi from
d pi Q = -pi dQ and sum d pi = 0, i.e. d pi = -pi dQ (Q - 1 pi)^-1 (the matrix
is invertible when the chain has one closed class; standard result).

Where the engine itself leaves the eigen-decomposition (ill-conditioned or
defective Q, see ``likelihood.eigensystem``), and for the stationary root of a
reducible chain, the gradient is taken by central finite differences of the
engine's ``log_likelihood`` instead.
"""

from __future__ import annotations

import math

import numba
import numpy as np

from .likelihood import (
    _LOG_SCALE,
    _MAX_EIGEN_CONDITION,
    _down_pass_eigen,
    _expm1_complex,
    _expm1_real,
    _p_from_eigen,
    _prune_matrices,
    _reachable,
    _real_eigensystem,
    eigensystem,
    log_likelihood,
    reachable,
    root_weights,
    stationary_distribution,
)

# How F is computed: F[m, n] off the diagonal is the difference quotient
# (expm1(lam_m t) - expm1(lam_n t)) / (lam_m - lam_n): the expm1 values carry full
# relative precision, so its error is about eps * |lam| / |lam_m - lam_n| of the
# entry's scale t. For a near pair (gap below _NEAR_GAP times the spectral
# radius, e.g. the repeated eigenvalues of the equal-rates model) with
# |lam_m - lam_n| t <= _SERIES_LIMIT, t e^{lam_n t} (e^z - 1)/z with
# z = (lam_m - lam_n) t is used instead, (e^z - 1)/z by its series.
_NEAR_GAP = 1e-3
_SERIES_LIMIT = 0.5
# 1/(n+1)! for n = 0..14: the series of (e^z - 1)/z to z^14 (error < 2e-18 for |z| <= 0.5).
_PHI1 = np.array([1.0 / math.factorial(n + 1) for n in range(15)])
_ONE = np.ones(1)
# Step (in log-rate) of the central finite differences used where the analytic
# gradient does not apply: about the cube root of the machine epsilon.
FD_STEP = 1e-5


@numba.njit(cache=True)
def _phi1(z, coef):
    """(e^z - 1)/z by its series for |z| <= 0.5, real or complex z; as many
    terms as needed for a relative error below 1e-17."""
    a = abs(z)
    n = 4 if a < 1e-4 else (8 if a < 0.02 else coef.shape[0])
    s = z * 0.0 + coef[n - 1]
    for i in range(n - 2, -1, -1):
        s = s * z + coef[i]
    return s


@numba.njit(cache=True)
def _normalise_abs(x):
    """Divide x by its largest absolute entry; returns that entry (0 leaves x as it is)."""
    m = 0.0
    for i in range(x.shape[0]):
        a = abs(x[i])
        m = max(m, a)
    if m > 0.0:
        for i in range(x.shape[0]):
            x[i] /= m
    return m


@numba.njit(cache=True)
def _gradient_pass(
    child_ptr,
    children,
    n_tips,
    length,
    lam,
    E1,
    V,
    Vinv,
    P,
    use_matrices,
    partials,
    B,
    msg,
    root_outside,
    coef,
    G,
    dlen,
):
    """Up pass and accumulation of G (see the module docstring).

    partials   [n_nodes, k]  the down pass of the likelihood kernel (scaled per node)
    B, msg     [n_nodes, k]  V^-1 D_c and P_c D_c per branch (filled here when ``use_matrices``)
    E1         [n_nodes, k]  expm1(lam t) per branch (real or complex like V)
    P          [n_nodes, k, k] explicit transition matrices when ``use_matrices``
               (reducible chains, as in the likelihood kernel), else unused
    root_outside [k]         dL / dL_root,i of the root treatment
    G          [k, k]        filled with the sum over branches (same dtype as V)
    dlen       [n_nodes]     filled with d lnL / d t_c per branch: dP/dt = Q P, so
               u' Q P_c D_c / u' P_c D_c = sum_m (V'u)_m lam_m e^(lam_m t) (V^-1 D_c)_m / den
               (used by branch-length treatments; 0 at the root)
    Returns False if a branch's u' P D is not positive (underflow), so that the
    caller can fall back to finite differences.
    """
    n = partials.shape[0]
    k = partials.shape[1]
    if use_matrices:
        # B[c] = V^-1 D_c and the message P_c D_c (the eigen path fills them in its down pass)
        for c in range(n - 1):
            for m in range(k):
                s = Vinv[m, 0] * partials[c, 0]
                for j in range(1, k):
                    s += Vinv[m, j] * partials[c, j]
                B[c, m] = s
            for i in range(k):
                x = 0.0
                for j in range(k):
                    x += P[c, i, j] * partials[c, j]
                msg[c, i] = x
    # 1 / (lam_m - lam_n) for the difference quotients, and the near pairs (see 'How F is computed')
    inv_gap = np.zeros((k, k), dtype=lam.dtype)
    near = np.zeros((k, k), dtype=np.bool_)
    radius = 0.0
    for m in range(k):
        radius = max(radius, abs(lam[m]))
    for m in range(k):
        for q in range(k):
            gap = abs(lam[m] - lam[q])
            near[m, q] = gap < _NEAR_GAP * radius or gap == 0.0
            if gap > 0.0:
                inv_gap[m, q] = 1.0 / (lam[m] - lam[q])
    for m in range(k):
        for q in range(k):
            G[m, q] = 0.0
    outside = np.zeros((n, k))
    dlen[n - 1] = 0.0
    for i in range(k):
        outside[n - 1, i] = root_outside[i]
    _normalise_abs(outside[n - 1])
    u = np.empty(k)
    a = np.empty(k, dtype=V.dtype)
    for v in range(n - 1, n_tips - 1, -1):
        polytomy = child_ptr[v + 1] - child_ptr[v] > 2
        for p in range(child_ptr[v], child_ptr[v + 1]):
            c = children[p]
            for i in range(k):
                u[i] = outside[v, i]
            for r in range(child_ptr[v], child_ptr[v + 1]):
                s = children[r]
                if s != c:
                    for i in range(k):
                        u[i] *= msg[s, i]
                    if polytomy:
                        _normalise_abs(u)  # keep a long product away from underflow
            if _normalise_abs(u) == 0.0:
                return False
            den = 0.0
            for i in range(k):
                den += u[i] * msg[c, i]
            if not den > 0.0:
                return False
            for m in range(k):
                s = V[0, m] * u[0]
                for i in range(1, k):
                    s += V[i, m] * u[i]
                a[m] = s
            t = length[c]
            s = a[0] * lam[0] * (E1[c, 0] + 1.0) * B[c, 0]
            for m in range(1, k):
                s += a[m] * lam[m] * (E1[c, m] + 1.0) * B[c, m]
            dlen[c] = s.real / den
            if t > 0.0:
                for m in range(k):
                    am = a[m] / den
                    for q in range(k):
                        if m == q:
                            f = t * (E1[c, m] + 1.0)
                        elif near[m, q] and abs(lam[m] - lam[q]) * t <= _SERIES_LIMIT:
                            f = t * (E1[c, q] + 1.0) * _phi1((lam[m] - lam[q]) * t, coef)
                        else:
                            f = (E1[c, m] - E1[c, q]) * inv_gap[m, q]
                        G[m, q] += am * B[c, q] * f
            if c >= n_tips:
                # outside vector over c's states: u' P_c
                for j in range(k):
                    if use_matrices:
                        x = 0.0
                        for i in range(k):
                            x += u[i] * P[c, i, j]
                    else:
                        s = Vinv[0, j] * E1[c, 0] * a[0]
                        for m in range(1, k):
                            s += Vinv[m, j] * E1[c, m] * a[m]
                        x = u[j] + s.real
                    outside[c, j] = x
                _normalise_abs(outside[c])
    return True


@numba.njit(cache=True)
def _value_and_gradient(
    child_ptr,
    children,
    n_tips,
    length,
    Q,
    lam,
    E1,
    V,
    Vinv,
    tip_partials,
    data_weighted,
    weights,
    rate_index,
    coef,
    root_partial,
    grad,
    dlen,
):
    """Down pass (the likelihood kernel), root, up pass and contraction in one call.

    data_weighted: root weights L_i / sum L (FitzJohn et al. 2009), else ``weights``.
    Fills root_partial [k] (scaled), grad [n_params] (d lnL / d rate, before any
    stationary-root term) and dlen [n_nodes] (d lnL / d branch length). Returns (status, lnL): status 0 ok, 1 data impossible,
    2 gradient not available (underflow in the up pass; use finite differences).
    """
    n = child_ptr.shape[0] - 1
    k = Q.shape[0]
    reach = _reachable(Q)
    irreducible = True
    for i in range(k):
        for j in range(k):
            if not reach[i, j]:
                irreducible = False
    partials = np.empty((n, k))
    count = np.empty(n, dtype=np.int64)
    B = np.empty((n, k), dtype=V.dtype)
    msg = np.empty((n, k))
    if irreducible:
        P = np.empty((0, k, k))
        ok = _down_pass_eigen(
            child_ptr, children, n_tips, E1, V, Vinv, tip_partials, partials, count, B, msg
        )
    else:
        P = np.empty((n, k, k))
        _p_from_eigen(E1, V, Vinv, reach, length, P)
        ok = _prune_matrices(child_ptr, children, n_tips, P, tip_partials, partials, count)
    if not ok:
        return 1, -np.inf
    total = 0.0
    outside = np.empty(k)
    if data_weighted:
        s1 = 0.0
        s2 = 0.0
        for i in range(k):
            s1 += partials[n - 1, i]
            s2 += partials[n - 1, i] * partials[n - 1, i]
        if s1 > 0.0:
            total = s2 / s1
            for i in range(k):
                # d/dL_i of sum L^2 / sum L
                outside[i] = (2.0 * partials[n - 1, i] - total) / s1
    else:
        for i in range(k):
            total += weights[i] * partials[n - 1, i]
            outside[i] = weights[i]
    if not total > 0.0:
        return 1, -np.inf
    ll = math.log(total) - count[n - 1] * _LOG_SCALE
    for i in range(k):
        root_partial[i] = partials[n - 1, i] / total
    G = np.empty((k, k), dtype=V.dtype)
    if not _gradient_pass(
        child_ptr,
        children,
        n_tips,
        length,
        lam,
        E1,
        V,
        Vinv,
        P,
        not irreducible,
        partials,
        B,
        msg,
        outside,
        coef,
        G,
        dlen,
    ):
        return 2, ll
    # d lnL/d theta_p = sum over entries (i, j) of parameter p of H_ij - H_ii,
    # H = Re(V^-T G V^T)
    H = np.empty((k, k))
    for i in range(k):
        for j in range(k):
            s = G[0, 0] * 0.0
            for m in range(k):
                for q in range(k):
                    s += Vinv[m, i] * G[m, q] * V[j, q]
            H[i, j] = s.real
    for p in range(grad.shape[0]):
        grad[p] = 0.0
    for i in range(k):
        for j in range(k):
            p = rate_index[i, j]
            if i != j and p >= 0:
                grad[p] += H[i, j] - H[i, i]
    return 0, ll


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


@numba.njit(cache=True)
def _q_into(rates, rate_index, base, Q):
    """Q from the free rates, as ``RateModel.q_matrix`` (base holds the fixed rates)."""
    k = Q.shape[0]
    for i in range(k):
        for j in range(k):
            p = rate_index[i, j]
            if i == j:
                Q[i, j] = 0.0
            else:
                Q[i, j] = rates[p] if p >= 0 else base[i, j]
    for i in range(k):
        Q[i, i] = -_row_sum(Q[i])


@numba.njit(cache=True)
def _row_sum(a):
    """sum(a) added in NumPy's order for up to 128 terms (its pairwise sum: one by one
    below 8, else eight running sums), so Q's diagonal is bit for bit q_matrix's."""
    n = a.shape[0]
    if n < 8:
        s = 0.0
        for i in range(n):
            s += a[i]
        return s
    r = a[:8].copy()
    i = 8
    while i < n - n % 8:
        for j in range(8):
            r[j] += a[i + j]
        i += 8
    s = ((r[0] + r[1]) + (r[2] + r[3])) + ((r[4] + r[5]) + (r[6] + r[7]))
    while i < n:
        s += a[i]
        i += 1
    return s


@numba.njit(cache=True)
def _evaluate_rates(
    rates,
    rate_index,
    base,
    Q,
    max_condition,
    child_ptr,
    children,
    n_tips,
    length,
    E1,
    E1c,
    tip_partials,
    data_weighted,
    weights,
    coef,
    root_partial,
    grad,
    dlen,
):
    """Q, its eigensystem, expm1 and ``_value_and_gradient`` in one compiled call, for a
    root whose weights do not depend on Q. Returns (status, lnL) with status 0-2 as
    ``_value_and_gradient`` and 3 where this path does not apply (an ill-conditioned
    or defective Q). Real eigenvalues use ``_real_eigensystem`` and E1; complex ones
    (a chain with rates that cycle) LAPACK's complex solver on Q and E1c, where the
    general path calls NumPy's real one: the same numbers to rounding, not bit for bit."""
    _q_into(rates, rate_index, base, Q)
    ok, lam, V, Vinv = _real_eigensystem(Q, max_condition)
    if ok:
        _expm1_real(length, lam, E1)
        return _value_and_gradient(
            child_ptr,
            children,
            n_tips,
            length,
            Q,
            lam,
            E1,
            V,
            Vinv,
            tip_partials,
            data_weighted,
            weights,
            rate_index,
            coef,
            root_partial,
            grad,
            dlen,
        )
    if Q.shape[0] == 2:
        return 3, 0.0
    try:
        lamc, Vc = np.linalg.eig(Q.astype(np.complex128))
        Vinvc = np.linalg.inv(Vc)
    except Exception:  # noqa: BLE001 (numba catches no narrower class)
        return 3, 0.0
    real = True
    for m in range(lamc.shape[0]):
        if lamc[m].imag != 0.0:
            real = False
    cond = np.abs(Vc).sum(axis=0).max() * np.abs(Vinvc).sum(axis=0).max()
    if real or not cond < max_condition:  # real: the real solver turned Q down
        return 3, 0.0
    _expm1_complex(length, lamc, E1c)
    return _value_and_gradient(
        child_ptr,
        children,
        n_tips,
        length,
        Q,
        lamc,
        E1c,
        Vc,
        Vinvc,
        tip_partials,
        data_weighted,
        weights,
        rate_index,
        coef,
        root_partial,
        grad,
        dlen,
    )


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
        # the one-call path (``_evaluate_rates``): roots whose weights do not depend on Q
        self.fused = not self.stationary and k <= 128
        self.Q = np.empty((k, k))
        self.base = model.q_matrix(np.zeros(model.n_params))

    def __call__(self, rates, length=None):
        rates = np.asarray(rates, dtype=np.float64)
        tree = self.tree
        length = tree.length if length is None else length
        status, Q = 3, None
        if self.fused:
            status, ll = _evaluate_rates(
                rates,
                self.model.rate_index,
                self.base,
                self.Q,
                _MAX_EIGEN_CONDITION,
                tree.child_ptr,
                tree.children,
                tree.n_tips,
                length,
                self.E1[False],
                self.E1[True],
                self.tips,
                self.data_weighted,
                self.weights,
                _PHI1,
                self.root_partial,
                self.grad,
                self.dlen,
            )
        if status == 3:  # a stationary root, or an ill-conditioned or defective Q
            Q = self.model.q_matrix(rates)
            es = _analytic_eigensystem(Q, self.root)
            if es is None:
                return self._finite_differences(rates, length)
            lam, V, Vinv = es
            weights = stationary_distribution(Q) if self.stationary else self.weights
            complex_ = lam.dtype == np.complex128
            E1 = self.E1[complex_]
            (_expm1_complex if complex_ else _expm1_real)(length, lam, E1)
            status, ll = _value_and_gradient(
                tree.child_ptr,
                tree.children,
                tree.n_tips,
                length,
                Q,
                lam,
                E1,
                V,
                Vinv,
                self.tips,
                self.data_weighted,
                weights,
                self.model.rate_index,
                _PHI1,
                self.root_partial,
                self.grad,
                self.dlen,
            )
        if status == 1:
            self.dlen[:] = 0.0
            return -np.inf, np.zeros(self.model.n_params), self.dlen
        if status == 2:
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
