"""The ML search of a model with an estimated branch-length treatment: the optimiser's
coordinates (log-rates held to a length of the tree, and the branch value on its own
unit), its starts, and its objective, one compiled call per evaluation where it can.
"""

from __future__ import annotations

import math

import numpy as np

from .branches import Transform, with_lengths
from .descent import IMPOSSIBLE_OBJECTIVE, descend
from .gradient import FD_STEP, Evaluator
from .kernels import NOT_THIS_PATH, OK, treatment_objective
from .likelihood import log_likelihood

# ln L change per iteration (log-units, absolute) below which the rates-first descent
# of the null start stops: it only has to reach the basin, the joint descent polishes.
# It was 1e-2 relative to ln L: on a 400-tip tree (ln L -273) that stopped 12 log-units
# short of the given lengths' optimum, and the joint descent then ended 0.3 below it.
RATES_FIRST_DROP = 1e-2


class TreatmentSpace:
    """The optimiser's coordinates for a fit with an estimated treatment:
    z = (y_1..y_p, w), with rates exp(y) T / T'(x) and branch value x = null + s w.

    T and T' are a length of the given and of the transformed tree (the total of
    every branch; for delta the tip branches' total, for early_burst the geometric
    mean branch length: the registry's ``held``): moving the branch parameter then keeps
    the expected number of changes about the same, so the two are nearly
    uncorrelated (the rates alone would move with the tree's total length). s is
    the branch value's unit (the registry's ``step``); w = 0 is the null value and the
    bounds of w map back onto the bounds of x exactly."""

    def __init__(self, tree, tip_partials, model, root, treatment):
        self.tree, self.tip_partials, self.model, self.root = tree, tip_partials, model, root
        self.treatment = treatment
        self.p = model.n_params
        self.null = treatment.kind.null_x
        self.lo, self.hi = treatment.bounds()
        self.s = treatment.kind.step
        self.bounds = ((self.lo - self.null) / self.s, (self.hi - self.null) / self.s)
        self.transform = Transform(tree, treatment)
        self.given = self.transform.given
        self.evaluate = Evaluator(tree, tip_partials, model, root)
        self.rate_buffer = np.empty(self.p)
        # the kernels' bundles (``kernels``): the tree with the transform's output lengths
        tr = self.transform
        self.tree_arrays = (tree.child_ptr, tree.children, tree.n_tips, tr.out)
        self.search = (
            self.p,
            self.s,
            *self.bounds,
            self.null,
            self.lo,
            self.hi,
            self.given,
            self.rate_buffer,
        )

    def branch_x(self, z) -> float:
        """The branch value x at optimiser point z (the bounds of w map onto x's exactly)."""
        w = z[self.p]
        if w == self.bounds[0]:
            return self.lo
        if w == self.bounds[1]:
            return self.hi
        return self.null + self.s * w

    def starts(self, starts, seed):
        """The plain starts with w appended (a generator): the null value first, then
        seeded uniform draws of x within its bounds. The log-rates are those of the
        plain starts: they keep the parsimony guess's expected number of changes
        whatever the branch value."""
        rng = np.random.default_rng([seed, 14])
        for i, s in enumerate(starts):
            w = 0.0 if i == 0 else (float(rng.uniform(self.lo, self.hi)) - self.null) / self.s
            yield np.append(s, min(max(w, self.bounds[0]), self.bounds[1]))

    def rates_first(self, z0, rate_bounds, drop=RATES_FIRST_DROP):
        """z0 with its rates brought near their optimum at its own branch value (for the
        null start: the plain fit's first start on the given lengths, with a loose
        tolerance), where the joint descent then starts. From the parsimony guess the
        joint descent can slide into another basin of the branch value and end below
        the given lengths' optimum (measured: up to 3.4 log-units, on data near
        saturation); from near that optimum it rarely does. Not a guarantee: where
        the plain fit's best start is not its first, the fit can still end below it
        (the branch tests say so)."""
        p = self.p
        lengths, _, shift, _ = self._lengths(self.branch_x(z0))

        def objective(y):
            ll, grad, _ = self.evaluate(np.exp(y + shift), lengths)
            if not np.isfinite(ll):
                return IMPOSSIBLE_OBJECTIVE, np.zeros(p)
            return -ll, -grad

        _, y = descend(objective, z0[:p], rate_bounds, drop=drop)
        return np.append(y, z0[p])

    def _lengths(self, x):
        """(lengths, d lengths / dx, ln(T / T'), d ln(T / T') / dx) at branch value x (no
        scaling where T or T' is 0)."""
        lengths, dl, total, dtotal = self.transform(x)
        if self.given <= 0.0 or total <= 0.0:
            return lengths, dl, 0.0, 0.0
        return lengths, dl, math.log(self.given / total), -dtotal / total

    def rates(self, z):
        """The rates at optimiser point z: exp(y) T / T'(x)."""
        return np.exp(z[: self.p] + self._lengths(self.branch_x(z))[2])

    def _one_call(self, z):
        """(status, lnL, objective gradient) from ``kernels.treatment_objective``;
        NOT_THIS_PATH where that path does not apply (the tree has no height, or the
        evaluator's one-call path does not)."""
        ev = self.evaluate
        if not ev.fused or self.transform.flat:
            return NOT_THIS_PATH, 0.0, None
        out = np.empty(self.p + 1)
        status, ll = treatment_objective(
            z, self.search, self.transform.arrays, self.tree_arrays, ev.data, ev.work, out
        )
        return status, ll, out

    def value(self, z) -> float:
        """ln L at optimiser point z."""
        status, ll, _ = self._one_call(z)
        if status == OK:
            return ll
        lengths, _, shift, _ = self._lengths(self.branch_x(z))
        return log_likelihood(
            with_lengths(self.tree, lengths),
            self.tip_partials,
            self.model.q_matrix(np.exp(z[: self.p] + shift)),
            self.root,
            self.model.states,
        )

    def objective(self, z):
        """(-lnL, -gradient). d lnL / dy_i = d lnL / d ln r_i; d lnL / dx =
        sum_b d lnL / d t_b * d t_b / dx + sum_i d lnL / d ln r_i * d ln(T / T') / dx
        (chain rule), times s for w; a central difference where the rate gradient
        itself falls back to finite differences. Where the evaluator's one-call path
        applies (a root whose weights do not depend on Q, a well-conditioned Q), the
        transform, the rates and the chain rule run in the same compiled call
        (``kernels.treatment_objective``: on 150-tip trees the Python steps around it cost
        half as much as the likelihood itself)."""
        status, ll, out = self._one_call(z)
        if status == OK:
            return -ll, out
        p, ev = self.p, self.evaluate
        lengths, dl, shift, dshift = self._lengths(self.branch_x(z))
        ll, grad, dlen = ev(np.exp(z[:p] + shift), lengths)
        out = np.zeros(p + 1)
        if not np.isfinite(ll):
            return IMPOSSIBLE_OBJECTIVE, out
        if dlen is not None:
            g = (float(dlen @ dl) + float(grad.sum()) * dshift) * self.s
        else:
            up, down = z.copy(), z.copy()
            up[p] = min(z[p] + FD_STEP, self.bounds[1])
            down[p] = max(z[p] - FD_STEP, self.bounds[0])
            g = (self.value(up) - self.value(down)) / (up[p] - down[p])
        out[:p] = -grad
        out[p] = -g
        return -ll, out
