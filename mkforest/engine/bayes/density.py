"""The log posterior density of one model on one tree, and its exact gradient, in the
sampler's unconstrained coordinates.

z = (y_1..y_p[, w]): y_i = ln r_i (r: rate per branch-length unit) and, for an
estimated branch-length treatment, w = logit((x - lo) / (hi - lo)) of its value x in
the treatment's range [lo, hi] (``treatments.BOUNDS``). The density of z is

    ln L(r, x) + sum_i [ln p(s_i) + ln s_i] + ln sigma(w) + ln(1 - sigma(w)),   s_i = r_i H,

the rate prior on s (``Prior``) with the Jacobian of y -> s, and a uniform prior on x
with the Jacobian of w -> x (the constants included: its integral over z is the
marginal likelihood). d ln L / dy comes from ``gradient.Evaluator``; d ln L / dx from
its per-branch d ln L / dt chained with d t / dx of ``branches.Transform``.
"""

from __future__ import annotations

import math

import numpy as np

from ..branches import Transform, transformed_tree
from ..gradient import FD_STEP, Evaluator
from ..treatments import Treatment


def _log_sigmoid(w):
    """ln(1 / (1 + e^-w)) without overflow."""
    return -math.log1p(math.exp(-w)) if w >= 0 else w - math.log1p(math.exp(w))


class LogPosterior:
    """(ln density, gradient) at z; also the pieces callers report: rates and the
    branch value in their units, ln L at a point."""

    def __init__(self, tree, tip_partials, model, root, treatment, prior):
        treatment = treatment or Treatment()
        if not treatment.free:
            tree = transformed_tree(tree, treatment)
        self.tree, self.model, self.treatment, self.prior = tree, model, treatment, prior
        self.height = tree.height if tree.height > 0 else 1.0
        self.log_height = math.log(self.height)
        self.p = model.n_params
        self.free_branch = treatment.free
        self.n = self.p + (1 if self.free_branch else 0)
        tips = model.expand_tips(tip_partials)
        self.evaluate = Evaluator(tree, tips, model, root)
        if self.free_branch:
            self.lo, self.hi = treatment.bounds()
            self.transform = Transform(tree, treatment)
        a, b, c, lo, hi = prior.log_scale_terms()
        # the prior on y = ln r: a (y + ln H) - b H e^y + c per rate, y within [ylo, yhi]
        self.a, self.bH = a, b * self.height
        self.const = self.p * (c + a * self.log_height)
        # beyond |y| = 700, e^y leaves the floating-point range: the density there is 0
        # in double precision under every prior (a sampler's runaway trajectory)
        self.ylo = math.log(lo / self.height) if lo > 0 else -700.0
        self.yhi = min(math.log(hi / self.height), 700.0)

    def branch_x(self, w: float) -> float:
        """The treatment's value x for coordinate w (the range's ends never reached)."""
        return self.lo + (self.hi - self.lo) * math.exp(_log_sigmoid(w))

    def branch_w(self, x: float) -> float:
        u = (x - self.lo) / (self.hi - self.lo)
        return math.log(u / (1.0 - u))

    def log_likelihood(self, z) -> float:
        return self._likelihood(np.asarray(z, dtype=np.float64), gradient=False)[0]

    def _likelihood(self, z, gradient=True):
        """(ln L, d ln L / dz or None)."""
        p = self.p
        rates = np.exp(z[:p])
        if not self.free_branch:
            ll, grad, _ = self.evaluate(rates)
            return ll, (grad.copy() if gradient else None)
        w = float(z[p])
        x = self.branch_x(w)
        lengths, dl, _, _ = self.transform(x)
        ll, grad, dlen = self.evaluate(rates, lengths)
        if not gradient or not np.isfinite(ll):
            return ll, np.zeros(self.n)
        out = np.empty(self.n)
        out[:p] = grad
        if dlen is not None:
            dx = float(dlen @ dl)
        else:  # the rate gradient fell back to finite differences: so does x's
            up = self._likelihood(np.append(z[:p], w + FD_STEP), gradient=False)[0]
            down = self._likelihood(np.append(z[:p], w - FD_STEP), gradient=False)[0]
            out[p] = (up - down) / (2 * FD_STEP)
            return ll, out
        sig = math.exp(_log_sigmoid(w))
        out[p] = dx * (self.hi - self.lo) * sig * (1.0 - sig)
        return ll, out

    def log_prior(self, z):
        """(ln prior density of z, its gradient)."""
        p = self.p
        if p and (z[:p].min() < self.ylo or z[:p].max() > self.yhi):
            return -math.inf, np.zeros(self.n)
        value, grad_y = self.prior.log_density_log_scale(np.exp(z[:p] + self.log_height))
        if not self.free_branch:
            return value, grad_y
        w = float(z[p])
        value += _log_sigmoid(w) + _log_sigmoid(-w)
        return value, np.append(grad_y, 1.0 - 2.0 * math.exp(_log_sigmoid(w)))

    def log_prior_many(self, z):
        """ln prior density at every point of z [..., n] (vectorised ``log_prior``)."""
        z = np.asarray(z, dtype=np.float64)
        y = z[..., : self.p]
        value = self.a * y.sum(axis=-1) - self.bH * np.exp(y).sum(axis=-1) + self.const
        outside = np.any((y < self.ylo) | (y > self.yhi), axis=-1)
        value = np.where(outside, -np.inf, value)
        if self.free_branch:
            w = z[..., self.p]
            value = value - np.logaddexp(0.0, -w) - np.logaddexp(0.0, w)
        return value

    def __call__(self, z):
        """(ln posterior density: ln L + ln prior, gradient); -inf with a zero gradient
        where the data are impossible or the prior is 0. The sampler's inner loop: the
        plain case is written out (a few array operations around one Evaluator call)."""
        z = np.asarray(z, dtype=np.float64)
        if self.free_branch:
            lp, glp = self.log_prior(z)
            if not np.isfinite(lp):
                return -math.inf, np.zeros(self.n)
            ll, gll = self._likelihood(z)
            if not np.isfinite(ll):
                return -math.inf, np.zeros(self.n)
            return ll + lp, gll + glp
        if self.p and (z.min() < self.ylo or z.max() > self.yhi):
            return -math.inf, np.zeros(self.n)
        r = np.exp(z)
        ll, grad, _ = self.evaluate(r)
        if not ll > -math.inf:
            return -math.inf, np.zeros(self.n)
        value = ll + self.a * float(z.sum()) - self.bH * float(r.sum()) + self.const
        return value, grad + (self.a - self.bH * r)

    def reported(self, z):
        """[..., n] coordinates -> [..., n] values in their reported units: rates per
        branch-length unit, then the treatment's parameter (``Treatment.theta``)."""
        z = np.asarray(z, dtype=np.float64)
        out = np.exp(z)
        if self.free_branch:
            flat = z[..., self.p].ravel()
            theta = [self.treatment.theta(self.branch_x(float(w)), self.tree) for w in flat]
            out[..., self.p] = np.reshape(theta, z.shape[:-1])
        return out

    def start(self, rng):
        """A starting point: every scaled rate near 1 change along H (jittered), the
        treatment's null value where it has one inside its range."""
        y = -self.log_height + rng.normal(0.0, 0.5, self.p)
        if not self.free_branch:
            return y
        return np.append(y, rng.normal(0.0, 0.5))
