"""The compiled kernels behind one interface: what the likelihood's users call per
evaluation, and the exact gradient's passes.

Interface (every array float64 unless said; k states, n nodes, p free rates):

  tree bundle       (child_ptr int64 [n+1], children int64 [n-1], n_tips int,
                    length [n]): the topology in CSR form (``data.trees.TreeArrays``;
                    children before parents, the root last) and the branch lengths,
                    in the tree's own units (length[v] above node v; the root's 0).
  data bundle       (rate_index int64 [k, k], base [k, k], tips [n_tips, k],
                    data_weighted bool, weights [k]): the model's table (>= 0 a free
                    rate's number, -1 forbidden, -2 fixed), the fixed rates (``base``,
                    zero elsewhere), the tips' partial likelihoods (1 where a state is
                    possible), and the root: data_weighted (weights by the root's
                    conditional likelihoods; ``weights`` unused) or fixed ``weights``
                    summing to 1.
  work bundle       (Q [k, k], E1 [n, k], E1c complex128 [n, k], root_partial [k],
                    grad [p], dlen [n]): buffers the kernel overwrites: the rate
                    matrix, expm1(lam t) per branch (real or complex eigenvalues),
                    the root's partials (scaled), d lnL / d rate (per unit of rate,
                    before any stationary-root term) and d lnL / d length per branch.
  transform bundle  (``branches.Transform.arrays``): an estimable branch-length
                    treatment on one tree; see ``branches.transform_lengths``.
  search bundle     (p int, s, w_lo, w_hi, null, x_lo, x_hi, given, rates [p]): the
                    treatment search's coordinates (``treatment_search``): w = (x - null)
                    / s within [w_lo, w_hi], x within [x_lo, x_hi], the held length
                    of the given tree, and a buffer for the rates.

Rates are per unit of branch length; ln L in natural-log units. Every entry point
returns (status, lnL) with status one of the constants below.

The gradient (the passes below): with Q = V diag(lam) V^-1 and P_b = exp(Q t_b), the
derivative of P_b with respect to a rate theta is (standard result for the derivative
of the matrix exponential through the eigen-decomposition; e.g. Kalbfleisch & Lawless
1985, J. Am. Stat. Assoc. 80:863)

    dP_b/dtheta = V (F_b o (V^-1 dQ/dtheta V)) V^-1,
    F_b[m, n] = (exp(lam_m t) - exp(lam_n t)) / (lam_m - lam_n),  = t exp(lam_m t) if lam_m = lam_n,

where o is the elementwise product. With D_b the conditional likelihood below node b
(the down pass, Felsenstein 1981) and u_b the likelihood of everything outside b's
subtree per state of b's parent (the up pass, started from the root weights), every
branch satisfies u_b' P_b D_b = L, and

    d lnL / dtheta = sum_b u_b' dP_b D_b / (u_b' P_b D_b)
                   = sum_ij dQ_ij/dtheta (V^-T G V^T)_ij,
    G = sum_b ((V' u_b)(V^-1 D_b)') o F_b / (u_b' P_b D_b).

Dividing each branch by its own u_b' P_b D_b makes the sum free of the scale factors
of the passes, so the vectors need only be kept away from underflow (each is
normalised as it is made). G is k x k however many parameters there are, so the whole
gradient costs about as much as two or three likelihoods. The root treatments and the
fall-backs are in ``gradient``.
"""

from __future__ import annotations

import math

import numba
import numpy as np

from .branches import transform_lengths
from .likelihood import (
    LOG_SCALE,
    MAX_EIGEN_CONDITION,
    down_pass_eigen,
    expm1_complex,
    expm1_real,
    p_from_eigen,
    prune_matrices,
    reachable_mask,
    real_eigensystem,
)

# Status of every entry point.
OK = 0  # lnL and its gradient computed
IMPOSSIBLE = 1  # the data are impossible under these rates: lnL = -inf
USE_DIFFERENCES = 2  # lnL computed, the gradient not (up pass underflowed): take differences
NOT_THIS_PATH = 3  # this path does not apply (ill-conditioned or defective Q, no height)

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
PHI1 = np.array([1.0 / math.factorial(n + 1) for n in range(15)])


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
    stationary-root term) and dlen [n_nodes] (d lnL / d branch length). Returns (status, lnL):
    OK, IMPOSSIBLE, or USE_DIFFERENCES (underflow in the up pass).
    """
    n = child_ptr.shape[0] - 1
    k = Q.shape[0]
    reach = reachable_mask(Q)
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
        ok = down_pass_eigen(
            child_ptr, children, n_tips, E1, V, Vinv, tip_partials, partials, count, B, msg
        )
    else:
        P = np.empty((n, k, k))
        p_from_eigen(E1, V, Vinv, reach, length, P)
        ok = prune_matrices(child_ptr, children, n_tips, P, tip_partials, partials, count)
    if not ok:
        return IMPOSSIBLE, -np.inf
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
        return IMPOSSIBLE, -np.inf
    ll = math.log(total) - count[n - 1] * LOG_SCALE
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
        return USE_DIFFERENCES, ll
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
    return OK, ll


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
    root whose weights do not depend on Q. Returns (status, lnL) with the status of
    ``_value_and_gradient``, or NOT_THIS_PATH where this path does not apply (an ill-conditioned
    or defective Q). Real eigenvalues use ``real_eigensystem`` and E1; complex ones
    (a chain with rates that cycle) LAPACK's complex solver on Q and E1c, where the
    general path calls NumPy's real one: the same numbers to rounding, not bit for bit."""
    _q_into(rates, rate_index, base, Q)
    ok, lam, V, Vinv = real_eigensystem(Q, max_condition)
    if ok:
        expm1_real(length, lam, E1)
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
        return NOT_THIS_PATH, 0.0
    try:
        lamc, Vc = np.linalg.eig(Q.astype(np.complex128))
        Vinvc = np.linalg.inv(Vc)
    except Exception:  # noqa: BLE001 (numba catches no narrower class)
        return NOT_THIS_PATH, 0.0
    real = True
    for m in range(lamc.shape[0]):
        if lamc[m].imag != 0.0:
            real = False
    cond = np.abs(Vc).sum(axis=0).max() * np.abs(Vinvc).sum(axis=0).max()
    if real or not cond < max_condition:  # real: the real solver turned Q down
        return NOT_THIS_PATH, 0.0
    expm1_complex(length, lamc, E1c)
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


@numba.njit(cache=True)
def evaluate_rates(rates, tree, data, work):
    """Q from ``rates`` [p], its eigensystem, and (status, lnL) with the gradient into
    ``work`` (grad, dlen, root_partial), for a root whose weights do not depend on Q;
    NOT_THIS_PATH for an ill-conditioned or defective Q (bundles: module docstring)."""
    child_ptr, children, n_tips, length = tree
    rate_index, base, tips, data_weighted, weights = data
    Q, E1, E1c, root_partial, grad, dlen = work
    return _evaluate_rates(
        rates,
        rate_index,
        base,
        Q,
        MAX_EIGEN_CONDITION,
        child_ptr,
        children,
        n_tips,
        length,
        E1,
        E1c,
        tips,
        data_weighted,
        weights,
        PHI1,
        root_partial,
        grad,
        dlen,
    )


@numba.njit(cache=True)
def value_and_gradient(tree, eigen, data, work):
    """(status, lnL) and the gradient into ``work`` at a rate matrix whose eigensystem
    the caller found: eigen = (Q [k, k], lam [k], V [k, k], Vinv [k, k], E1 [n, k] =
    expm1(lam t) per branch), real or complex128 alike; ``work``'s own Q, E1 and E1c
    are not used (bundles: module docstring)."""
    child_ptr, children, n_tips, length = tree
    rate_index, base, tips, data_weighted, weights = data
    Q, lam, V, Vinv, E1 = eigen
    _, _, _, root_partial, grad, dlen = work
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
        tips,
        data_weighted,
        weights,
        rate_index,
        PHI1,
        root_partial,
        grad,
        dlen,
    )


@numba.njit(cache=True)
def treatment_objective(z, search, transform, tree, data, work, out):
    """The treatment search's objective at z = (y_1..y_p, w) in one compiled call:
    branch value x from w, the transformed lengths (into ``tree``'s length, the
    transform's own output), the rates exp(y) T / T', ``evaluate_rates`` and the chain
    rule. Returns (status, lnL); out [p + 1] = (-d lnL / dy, -d lnL / dw) when OK."""
    p, s, w_lo, w_hi, null, x_lo, x_hi, given, rates = search
    w = z[p]
    x = x_lo if w == w_lo else (x_hi if w == w_hi else null + s * w)
    total, dtotal = transform_lengths(transform, x)
    shift, dshift = 0.0, 0.0
    if given > 0.0 and total > 0.0:
        shift = math.log(given / total)
        dshift = -dtotal / total
    for i in range(p):
        rates[i] = math.exp(z[i] + shift)
    status, ll = evaluate_rates(rates, tree, data, work)
    if status != OK:
        return status, ll
    _, _, _, _, grad, dlen = work
    dl = transform[10]
    lengths = tree[3]
    gsum = 0.0
    for i in range(p):
        gy = grad[i] * rates[i]
        out[i] = -gy
        gsum += gy
    gl = 0.0
    for b in range(lengths.shape[0]):
        gl += dlen[b] * dl[b]
    out[p] = -(gl + gsum * dshift) * s
    return status, ll
