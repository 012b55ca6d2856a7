"""Branch-length treatments: effective branch lengths as a function of one parameter.

The likelihood sees a tree only through its branch lengths, so a treatment is a
pure function (tree arrays, theta) -> (lengths t'_b, d t'_b / d theta); fitting
treats theta as one more parameter and chains d lnL / d t'_b (the gradient's
per-branch term) with d t'_b / d theta. t_b is the given length above node b,
d(v) the root-to-node distance and H the largest root-to-tip distance.

  as_given      t'_b = t_b
  unit          t'_b = 1 (change per speciation event); zero-length branches stay 0
  kappa         t'_b = t_b^kappa, 0 for t_b = 0 (Pagel 1994, Proc. R. Soc. B 255:37)
  lambda        internal t'_b = lambda t_b; a tip's branch is lengthened to keep its
                distance from the root: t'_b = d(b) - lambda d(parent) (Pagel 1999,
                Nature 401:877)
  delta         d'(v) = H (d(v)/H)^delta, t'_b = d'(b) - d'(parent) (Pagel 1999)
  early_burst   rate e^(a s) at distance s from the root: a branch from s0 to s1 has
                t'_b = (e^(a s1) - e^(a s0)) / a, t_b when a = 0 (the discrete-trait
                form of Harmon et al. 2010, Evolution 64:2385)

kappa = lambda = delta = 1 and a = 0 give the tree's own lengths (exactly), so a
model with an estimated treatment is nested in the same model on the given
lengths. The optimiser works on x: x = theta for kappa and lambda, x = ln delta
(delta is an exponent spanning two decades: on its own scale the optimiser took
several times more steps), and x = a H for early_burst (so its bounds do not
depend on the unit of length).
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

import numba
import numpy as np

from .treatments import (  # noqa: F401 (the names users of this module import)
    BOUNDS,
    DELTA_RANGE,
    ESTIMABLE,
    HELD_GEOMETRIC,
    HELD_TIPS,
    HELD_TOTAL,
    NULL_VALUE,
    REGISTRY,
    TREATMENTS,
    Treatment,
    parse_label,
    parse_treatment,
)

if TYPE_CHECKING:
    from ..data.trees import TreeArrays

# 1/(n+1)! and n/(n+1)! for the series of phi(z) = (e^z - 1)/z and phi'(z), |z| <= 0.5
# (18 terms: truncation error below 1e-20).
_PHI = np.array([1.0 / math.factorial(n + 1) for n in range(18)])
_DPHI = np.array([(n + 1) / math.factorial(n + 2) for n in range(18)])


@numba.njit(cache=True)
def _phi_pair(z, phi_coef, dphi_coef):
    """(phi(z), phi'(z)) with phi(z) = (e^z - 1)/z, phi'(z) = (e^z (z - 1) + 1)/z^2, to full
    relative precision: their series for |z| <= 0.5, where the closed forms cancel."""
    if abs(z) <= 0.5:
        n = phi_coef.shape[0]
        p = phi_coef[n - 1]
        q = dphi_coef[n - 1]
        for i in range(n - 2, -1, -1):
            p = p * z + phi_coef[i]
            q = q * z + dphi_coef[i]
        return p, q
    return math.expm1(z) / z, (math.exp(z) * (z - 1.0) + 1.0) / (z * z)


@numba.njit(cache=True)
def _transform(
    code, t, d, log_t, log_r, parent, n_tips, H, x, phi_coef, dphi_coef, held, out, deriv
):
    """Effective lengths (out) and d/dx (deriv) for one estimable treatment, every node
    (the formulas of the module docstring; the root's entry is 0), and the length the
    fit holds the rates to with its d/dx (``_held_length``, kind ``held``). ``code`` is
    the registry's (``treatments.REGISTRY``). log_t = ln t
    and log_r = ln(d/H) per node, computed once per tree (0 where t or d is 0)."""
    n = t.shape[0]
    for v in range(n - 1):
        p = parent[v]
        s0 = d[p]
        if code == 0:  # kappa: t^kappa, zero-length branches stay zero
            if t[v] > 0.0:
                out[v] = math.exp(x * log_t[v]) if x != 1.0 else t[v]
                deriv[v] = out[v] * log_t[v]
            else:
                out[v] = 0.0
                deriv[v] = 0.0
        elif code == 1:  # lambda; t + (1 - lambda) d(parent) for a tip is exactly t at 1
            if v < n_tips:
                out[v] = t[v] + (1.0 - x) * s0
                deriv[v] = -s0
            else:
                out[v] = x * t[v]
                deriv[v] = t[v]
        elif code == 2:  # delta = e^x: difference of the transformed depths H (d/H)^delta
            delta = math.exp(x)
            new1 = 0.0
            der1 = 0.0
            if d[v] > 0.0:
                new1 = H * math.exp(delta * log_r[v])
                der1 = new1 * log_r[v] * delta
            new0 = 0.0
            der0 = 0.0
            if s0 > 0.0:
                new0 = H * math.exp(delta * log_r[p])
                der0 = new0 * log_r[p] * delta
            # depths are monotone in d, so a negative difference is round-off;
            # delta = 1 is the identity, exactly (a difference of depths rounds)
            out[v] = t[v] if x == 0.0 else max(new1 - new0, 0.0)
            deriv[v] = der1 - der0
        else:  # early burst, a = x / H: e^(a s0) t phi(a t)
            a = x / H
            phi, dphi = _phi_pair(a * t[v], phi_coef, dphi_coef)
            grow = math.exp(a * s0)
            out[v] = grow * t[v] * phi
            # d/da = s0 t' + e^(a s0) t^2 phi'(a t); d/dx = d/da / H
            deriv[v] = (s0 * out[v] + grow * t[v] * t[v] * dphi) / H
    out[n - 1] = 0.0
    deriv[n - 1] = 0.0
    return _held_length(held, t, n_tips, out, deriv)


@numba.njit(cache=True)
def _held_length(held, t, n_tips, out, deriv):
    """(L, dL/dx) of lengths ``out`` with derivatives ``deriv``: held 0 (``HELD_TOTAL``),
    the sum over every branch; 1, over the tip branches; 2 (``HELD_GEOMETRIC``), the
    geometric mean over the branches whose
    given length t is positive (a treatment held this way must keep those positive,
    as early_burst does; a zero gives L = 0, which the fit reads as "no scaling")."""
    n = out.shape[0]
    if held == HELD_GEOMETRIC:
        logs, ratio, count = 0.0, 0.0, 0
        for v in range(n - 1):
            if t[v] > 0.0:
                if out[v] <= 0.0:
                    return 0.0, 0.0
                logs += math.log(out[v])
                ratio += deriv[v] / out[v]
                count += 1
        if count == 0:
            return 0.0, 0.0
        g = math.exp(logs / count)
        return g, g * ratio / count
    last = n_tips if held == HELD_TIPS else n - 1
    total, dtotal = 0.0, 0.0
    for v in range(last):
        total += out[v]
        dtotal += deriv[v]
    return total, dtotal


def _logs(tree):
    """(depths, ln t, ln(d/H), H) of a tree, computed once and kept in its cache."""
    if "branch_logs" not in tree._cache:
        d = tree.depths()
        H = float(d[: tree.n_tips].max())
        t = tree.length
        log_t = np.log(np.where(t > 0.0, t, 1.0))
        log_r = np.log(np.where(d > 0.0, d / H, 1.0)) if H > 0 else np.zeros_like(d)
        tree._cache["branch_logs"] = (d, log_t, log_r, H)
    return tree._cache["branch_logs"]


def effective_lengths(tree, treatment: Treatment, x: float | None = None):
    """(lengths [n_nodes], d lengths / d x [n_nodes]) of ``treatment`` at optimiser value x
    (ignored for a fixed or parameter-free treatment; d/dx is then zero)."""
    t = tree.length
    name = treatment.name
    if treatment.fixed is not None:
        x = treatment.x_of(treatment.fixed, tree)
    d, log_t, log_r, H = _logs(tree)
    if name == "as_given" or H == 0.0:
        return t, np.zeros_like(t)
    if name == "unit":
        return np.where(t > 0.0, 1.0, 0.0), np.zeros_like(t)
    kind = REGISTRY[name]
    out = np.empty_like(t)
    deriv = np.empty_like(t)
    _transform(
        kind.code,
        t,
        d,
        log_t,
        log_r,
        tree.parent,
        tree.n_tips,
        H,
        float(x),
        _PHI,
        _DPHI,
        HELD_TOTAL,
        out,
        deriv,
    )
    return out, deriv


@numba.njit(cache=True)
def transform_lengths(arrays, x):
    """``_transform`` on a transform bundle (``Transform.arrays``: code, given lengths t
    [n], depths d [n], ln t [n], ln(d/H) [n], parent int64 [n], n_tips, H, held, output
    lengths [n], output d lengths / dx [n]; lengths in the tree's units) at optimiser
    value x: fills the two outputs and returns (held length, its d/dx)."""
    code, t, d, log_t, log_r, parent, n_tips, H, held, out, deriv = arrays
    return _transform(code, t, d, log_t, log_r, parent, n_tips, H, x, _PHI, _DPHI, held, out, deriv)


class Transform:
    """An estimable treatment's lengths on one tree, evaluated again and again (the
    optimiser's inner loop): the tree's logs are looked up once and the output
    arrays reused, so ``__call__`` is one compiled pass. Returns (lengths,
    d lengths / dx, the length the fit holds the rates to (the registry's ``held``), its derivative);
    the arrays are overwritten by the next call. ``given`` is that length on the
    given branch lengths."""

    def __init__(self, tree, treatment: Treatment):
        self.tree = tree
        self.code = treatment.kind.code
        self.held = treatment.kind.held
        self.d, self.log_t, self.log_r, H = _logs(tree)
        t = tree.length
        self.given = _held_length(self.held, t, tree.n_tips, t, np.zeros_like(t))[0]
        self.flat = H == 0.0  # no height: every treatment leaves the lengths as they are
        self.H = H
        self.out = np.empty_like(tree.length)
        self.deriv = np.empty_like(tree.length)
        # the kernels' transform bundle (``transform_lengths``)
        self.arrays = (
            self.code,
            t,
            self.d,
            self.log_t,
            self.log_r,
            tree.parent,
            tree.n_tips,
            H,
            self.held,
            self.out,
            self.deriv,
        )

    def __call__(self, x: float):
        t = self.tree.length
        if self.flat:
            self.out[:] = t
            self.deriv[:] = 0.0
            return self.out, self.deriv, self.given, 0.0
        total, dtotal = transform_lengths(self.arrays, float(x))
        return self.out, self.deriv, total, dtotal


def with_lengths(tree, lengths) -> TreeArrays:
    """A copy of ``tree`` (same topology, index and set) with other branch lengths."""
    return tree.with_lengths(lengths)


def transformed_tree(tree, treatment: Treatment, theta: float | None = None) -> TreeArrays:
    """The tree with the effective lengths of ``treatment`` at parameter ``theta``
    (the reported value: kappa, lambda, delta or a)."""
    if treatment.name == "as_given":
        return tree
    x = None if theta is None else treatment.x_of(theta, tree)
    if treatment.free and x is None:
        raise ValueError(f"treatment {treatment.name} needs a parameter value")
    return with_lengths(tree, effective_lengths(tree, treatment, x)[0])


def tree_of_fit(tree, label, parameter) -> TreeArrays:
    """The tree a fit used, from its fits.tsv ``branches`` label ('as_given', 'unit',
    'kappa', 'kappa=0', ...) and ``branch_parameter`` (estimate; nan when fixed or none)."""
    treatment = parse_label(label)
    if treatment.name == "as_given":
        return tree
    if treatment.free:
        return transformed_tree(tree, treatment, float(parameter))
    return transformed_tree(tree, treatment)
