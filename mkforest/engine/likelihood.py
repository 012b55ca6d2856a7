"""Likelihood of a Markov model of trait change on a tree (Felsenstein 1981 pruning).

The hot path is ``log_likelihood``: transition probabilities P(t) = exp(Qt) for
every branch from one eigen-decomposition of Q, then one postorder loop
compiled with numba. Partial likelihoods are rescaled by exact powers of two
when they grow small, so trees of any size neither underflow nor lose digits.
"""

from __future__ import annotations

import math

import numba
import numpy as np
import scipy.linalg

from ..errors import InputError

# Rescale a partial likelihood vector when its largest entry drops below 2^-256;
# scaling by a power of two is exact in floating point.
_SCALE_EXP = 256
_SCALE_LIMIT = 2.0**-_SCALE_EXP
LOG_SCALE = _SCALE_EXP * math.log(2.0)

# Eigen-decomposition is used when V is well conditioned (error ~ cond(V) * 1e-16);
# otherwise (defective or nearly defective Q) scipy's scaling-and-squaring expm.
MAX_EIGEN_CONDITION = 1e5


@numba.njit(cache=True)
def p_from_eigen(E1, V, Vinv, reach, t, out):
    """out[b] = I + V diag(E1[b]) Vinv with E1[b] = expm1(lam t_b), real part.

    Writing P = I + V diag(expm1) Vinv keeps the small entries of P accurate to
    full relative precision on short branches (no cancellation against 1);
    entries for states that cannot be reached from the start state are exactly
    zero, and t_b == 0 gives the identity exactly."""
    n = t.shape[0]
    k = V.shape[0]
    for b in range(n):
        for i in range(k):
            for j in range(k):
                if t[b] == 0.0 or not reach[i, j]:
                    out[b, i, j] = 1.0 if i == j else 0.0
                    continue
                s = V[i, 0] * E1[b, 0] * Vinv[0, j]
                for m in range(1, k):
                    s += V[i, m] * E1[b, m] * Vinv[m, j]
                x = s.real + (1.0 if i == j else 0.0)
                # round-off can leave -1e-17 where the probability is tiny
                out[b, i, j] = max(0.0, x)


@numba.njit(cache=True)
def down_pass_eigen(
    child_ptr, children, n_tips, E1, V, Vinv, tip_partials, partials, scale_count, B, msg
):
    """Postorder pass for an irreducible chain, with P(t) D = D + V diag(E1) Vinv D
    applied as two small products per branch (E1[c] = expm1(lam t_c)); real or
    complex eigensystems. Zero-length branches pass the partials on unchanged.

    Fills partials [n_nodes, k] (scaled) and scale_count [n_nodes] (how many times
    2^256 was factored out at or below each node), and keeps for every branch c
    what the gradient's up pass needs: B[c] = Vinv D_c and msg[c] = P_c D_c.
    Returns False if the data are impossible under the model (a partial vector
    is all zero)."""
    n_nodes = partials.shape[0]
    k = partials.shape[1]
    for v in range(n_tips):
        for i in range(k):
            partials[v, i] = tip_partials[v, i]
        scale_count[v] = 0
    for v in range(n_tips, n_nodes):
        for i in range(k):
            partials[v, i] = 1.0
        count = 0
        for p in range(child_ptr[v], child_ptr[v + 1]):
            c = children[p]
            count += scale_count[c]
            zero = True
            for m in range(k):
                if E1[c, m] != 0.0:
                    zero = False
            for m in range(k):
                s = Vinv[m, 0] * partials[c, 0]
                for j in range(1, k):
                    s += Vinv[m, j] * partials[c, j]
                B[c, m] = s
            if zero:
                for i in range(k):
                    msg[c, i] = partials[c, i]
                    partials[v, i] *= partials[c, i]
                continue
            for i in range(k):
                s = V[i, 0] * (B[c, 0] * E1[c, 0])
                for m in range(1, k):
                    s += V[i, m] * (B[c, m] * E1[c, m])
                x = s.real + partials[c, i]
                # round-off can leave -1e-17 where the probability is tiny
                x = max(0.0, x)
                msg[c, i] = x
                partials[v, i] *= x
        count += _rescale(partials, v, k)
        if count < 0:
            return False
        scale_count[v] = count
    return True


@numba.njit(cache=True)
def prune_matrices(child_ptr, children, n_tips, P, tip_partials, partials, scale_count):
    """The same pass with explicit transition matrices P [n_nodes, k, k]."""
    n_nodes = partials.shape[0]
    k = partials.shape[1]
    for v in range(n_tips):
        for i in range(k):
            partials[v, i] = tip_partials[v, i]
        scale_count[v] = 0
    for v in range(n_tips, n_nodes):
        for i in range(k):
            partials[v, i] = 1.0
        count = 0
        for p in range(child_ptr[v], child_ptr[v + 1]):
            c = children[p]
            count += scale_count[c]
            for i in range(k):
                s = 0.0
                for j in range(k):
                    s += P[c, i, j] * partials[c, j]
                partials[v, i] *= s
        count += _rescale(partials, v, k)
        if count < 0:
            return False
        scale_count[v] = count
    return True


@numba.njit(cache=True)
def _rescale(partials, v, k):
    """Multiply row v by 2^256 until its largest entry is >= 2^-256; returns how
    many times, or a large negative number if the row is all zero."""
    m = 0.0
    for i in range(k):
        m = max(m, partials[v, i])
    if m == 0.0:
        return -(1 << 40)
    n = 0
    while m < _SCALE_LIMIT:
        for i in range(k):
            partials[v, i] *= 2.0**_SCALE_EXP
        m *= 2.0**_SCALE_EXP
        n += 1
    return n


@numba.njit(cache=True)
def expm1_real(t, lam, out):
    """out[b, m] = expm1(lam_m t_b) for real eigenvalues."""
    for b in range(t.shape[0]):
        for m in range(lam.shape[0]):
            out[b, m] = math.expm1(lam[m] * t[b])


@numba.njit(cache=True)
def expm1_complex(t, lam, out):
    """out[b, m] = expm1(lam_m t_b) for complex eigenvalues, to full relative precision:
    e^{x+iy} - 1 = (expm1(x) cos y - 2 sin^2(y/2)) + i e^x sin y. A conjugate pair
    (as returned by LAPACK, one after the other) is computed once."""
    k = lam.shape[0]
    for m in range(k):
        if m > 0 and lam[m].imag != 0.0 and lam[m] == np.conj(lam[m - 1]):
            for b in range(t.shape[0]):
                out[b, m] = np.conj(out[b, m - 1])
            continue
        re = lam[m].real
        im = lam[m].imag
        for b in range(t.shape[0]):
            x = re * t[b]
            if im == 0.0:
                out[b, m] = math.expm1(x)
            else:
                y = im * t[b]
                h = math.sin(0.5 * y)
                out[b, m] = complex(
                    math.expm1(x) * math.cos(y) - 2.0 * h * h, math.exp(x) * math.sin(y)
                )


def expm1_outer(t, lam) -> np.ndarray:
    """E1[b, m] = expm1(lam_m t_b), real or complex like lam, to full relative precision."""
    out = np.empty((t.shape[0], lam.shape[0]), dtype=lam.dtype)
    if lam.dtype == np.complex128:
        expm1_complex(t, lam, out)
    else:
        expm1_real(t, lam, out)
    return out


def check_rate_matrix(Q) -> np.ndarray:
    """Q as a float64 array, or a ValueError unless square, finite, with non-negative
    off-diagonal rates."""
    Q = np.asarray(Q, dtype=np.float64)
    off = Q - np.diag(np.diag(Q))
    if Q.ndim != 2 or Q.shape[0] != Q.shape[1]:
        raise ValueError(f"rate matrix must be square, got shape {Q.shape}")
    if (off < 0).any() or not np.isfinite(Q).all():
        raise ValueError("rate matrix has a negative or non-finite off-diagonal rate")
    return Q


@numba.njit(cache=True)
def real_eigensystem(Q, max_condition):
    """(ok, lam, V, Vinv) for a Q whose eigenvalues are all real: two states in closed
    form (a = Q01, b = Q10, s = a + b > 0): lam = (0, -s), V = [[1, a/s], [1, -b/s]],
    Vinv = [[b/s, a/s], [1, -1]] (det V = -1, so V is well conditioned whatever the
    rates; it skips LAPACK's general solver, whose call overhead dominates a
    two-state likelihood), else LAPACK. ok is False when an eigenvalue is complex
    (numba's eig will not change domain), V is singular, or its condition number
    reaches max_condition."""
    k = Q.shape[0]
    if k == 2 and Q[0, 1] + Q[1, 0] > 0.0:
        a = Q[0, 1]
        b = Q[1, 0]
        s = a + b
        pa = a / s
        pb = b / s
        return (
            True,
            np.array([0.0, -s]),
            np.array([[1.0, pa], [1.0, -pb]]),
            np.array([[pb, pa], [1.0, -1.0]]),
        )
    try:
        lam, V = np.linalg.eig(Q)
        Vinv = np.linalg.inv(V)
    except Exception:  # noqa: BLE001 (numba catches no narrower class)
        return False, np.zeros(k), np.zeros((k, k)), np.zeros((k, k))
    cond = np.abs(V).sum(axis=0).max() * np.abs(Vinv).sum(axis=0).max()
    return cond < max_condition, lam, V, Vinv


def eigensystem(Q):
    """(lam, V, Vinv) with Q = V diag(lam) Vinv, real when every eigenvalue is real;
    None when V is ill-conditioned (defective or nearly defective Q).

    Real eigenvalues are decomposed in compiled code (``real_eigensystem``: a fifth of
    the Python wrapper's time); complex ones, and the rare real Q it turns down, by
    NumPy, which then also judges the condition."""
    ok, lam, V, Vinv = real_eigensystem(np.ascontiguousarray(Q), MAX_EIGEN_CONDITION)
    if ok:
        return lam, V, Vinv
    lam, V = np.linalg.eig(Q)
    try:
        Vinv = np.linalg.inv(V)
    except np.linalg.LinAlgError:
        return None
    if np.abs(V).sum(axis=0).max() * np.abs(Vinv).sum(axis=0).max() >= MAX_EIGEN_CONDITION:
        return None
    if not lam.imag.any():
        return lam.real.copy(), np.ascontiguousarray(V.real), np.ascontiguousarray(Vinv.real)
    return lam, np.ascontiguousarray(V), np.ascontiguousarray(Vinv)


@numba.njit(cache=True)
def reachable_mask(Q):
    """bool [k,k]: j can be reached from i (i itself included); the transitive closure
    of Q > 0 (Warshall's algorithm)."""
    k = Q.shape[0]
    R = np.zeros((k, k), dtype=np.bool_)
    for i in range(k):
        for j in range(k):
            R[i, j] = i == j or Q[i, j] > 0.0
    for m in range(k):
        for i in range(k):
            if R[i, m]:
                for j in range(k):
                    if R[m, j]:
                        R[i, j] = True
    return R


def reachable(Q) -> np.ndarray:
    """bool [k,k]: j can be reached from i (i itself included), i.e. P_ij(t) > 0 for t > 0."""
    return reachable_mask(np.ascontiguousarray(Q, dtype=np.float64))


def transition_matrices(Q, t) -> np.ndarray:
    """P[b] = exp(Q t[b]) for every t[b] >= 0; float64 [len(t), k, k].

    Right for every valid rate matrix: complex eigenvalues (non-reversible
    cycles) via complex arithmetic, defective or ill-conditioned ones via
    scaling-and-squaring (scipy.linalg.expm). Unreachable states get exact zeros.
    """
    Q = check_rate_matrix(Q)
    t = np.ascontiguousarray(t, dtype=np.float64)
    k = Q.shape[0]
    out = np.empty((t.shape[0], k, k))
    reach = reachable(Q)
    es = eigensystem(Q)
    if es is not None:
        lam, V, Vinv = es
        p_from_eigen(expm1_outer(t, lam), V, Vinv, reach, t, out)
        return out
    out[:] = scipy.linalg.expm(Q[None, :, :] * t[:, None, None])
    np.maximum(out, 0.0, out=out)
    out[:, ~reach] = 0.0
    zero = t == 0.0
    if zero.any():
        out[zero] = np.eye(k)
    return out


def stationary_distribution(Q) -> np.ndarray:
    """pi with pi Q = 0 and sum(pi) = 1.

    Transient states (those that can reach a state they cannot come back from)
    get exactly 0. When the chain has several closed classes (e.g. two absorbing
    states) the stationary distribution is not unique; the least-squares
    minimum-norm solution is returned, which spreads the weight over the classes.
    """
    Q = np.asarray(Q, dtype=np.float64)
    k = Q.shape[0]
    reach = reachable(Q)
    recurrent = np.array([reach[:, i][reach[i]].all() for i in range(k)])
    sub = Q[np.ix_(recurrent, recurrent)]
    m = int(recurrent.sum())
    A = np.vstack([sub.T, np.ones((1, m))])
    b = np.zeros(m + 1)
    b[-1] = 1.0
    pi = np.zeros(k)
    pi[recurrent] = np.maximum(np.linalg.lstsq(A, b, rcond=None)[0], 0.0)
    return pi / pi.sum()


def root_weights(root, Q, root_partial, states=None) -> np.ndarray:
    """Weights of each root state under a root treatment (sum to one)."""
    k = Q.shape[0]
    if root == "uniform":
        return np.full(k, 1.0 / k)
    if root == "stationary":
        return stationary_distribution(Q)
    if root == "data_weighted":
        # FitzJohn, Maddison & Otto (2009): weight each state by its own likelihood
        total = root_partial.sum()
        return root_partial / total if total > 0 else np.full(k, 1.0 / k)
    w = np.zeros(k)
    at = _root_state_index(root, states, k)
    w[at] = 1.0 / len(at)
    return w


def _root_state_index(root, states, k) -> list:
    """Indices of the fixed root state: the state itself, or with hidden rate classes
    every combined state 'root@c' of that observed state (equal weights 1/R; the
    root's class is not fixed)."""
    if states is not None and root in states:
        return [list(states).index(root)]
    if states is not None and isinstance(root, str):
        at = [
            i
            for i, s in enumerate(states)
            if s.rpartition("@")[0] == root and s.rpartition("@")[2].isdigit()
        ]
        if at:
            return at
    if isinstance(root, (int, np.integer)) and 0 <= root < k:
        return [int(root)]
    shown = f" or one of the states ({', '.join(states)})" if states is not None else ""
    raise InputError(
        f"root treatment '{root}' is not known: use uniform, stationary, data_weighted{shown}."
    )


def prune(tree, tip_partials, Q):
    """Conditional likelihoods at every node under rate matrix Q:
    (partials [n_nodes, k], log_scale [n_nodes]).

    The conditional likelihood of the data below node v, given its state, is
    partials[v] * exp(log_scale[v]). Returns (None, None) when the data are
    impossible under the model.
    """
    Q = np.asarray(Q, dtype=np.float64)
    tip_partials = np.ascontiguousarray(tip_partials, dtype=np.float64)
    n = tree.n_nodes
    partials = np.empty((n, Q.shape[0]))
    count = np.empty(n, dtype=np.int64)
    es = eigensystem(Q) if reachable(Q).all() else None
    if es is not None:
        lam, V, Vinv = es
        E1 = expm1_outer(tree.length, lam)
        B = np.empty((n, Q.shape[0]), dtype=E1.dtype)
        msg = np.empty((n, Q.shape[0]))
        ok = down_pass_eigen(
            tree.child_ptr,
            tree.children,
            tree.n_tips,
            E1,
            V,
            Vinv,
            tip_partials,
            partials,
            count,
            B,
            msg,
        )
    else:
        P = transition_matrices(Q, tree.length)
        ok = prune_matrices(
            tree.child_ptr, tree.children, tree.n_tips, P, tip_partials, partials, count
        )
    if not ok:
        return None, None
    return partials, -count * LOG_SCALE


def log_likelihood(tree, tip_partials, Q, root="uniform", states=None) -> float:
    """ln L of the tip data on the tree under rate matrix Q and a root treatment.

    root: "uniform" (each state 1/k), "stationary" (stationary distribution of Q),
    "data_weighted" (ln sum_i L_i^2 / sum_i L_i; FitzJohn et al. 2009), or a state
    label (with ``states``) / index fixing the root state.
    """
    partials, log_scale = prune(tree, tip_partials, Q)
    if partials is None:
        return -np.inf
    r = partials[tree.root]
    w = root_weights(root, np.asarray(Q), r, states)
    total = float(w @ r)
    if total <= 0.0:
        return -np.inf
    return math.log(total) + float(log_scale[tree.root])
