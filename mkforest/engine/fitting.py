"""Maximum-likelihood fits of a rate model on one tree.

Rates are optimised on the log scale within bounds set relative to the tree's
height H: every rate lies in [lower/H, upper/H] (by default 1e-6 and 1e4
expected changes along a root-to-tip path). Starts are tried one after another
in a fixed seeded order (the first at a parsimony-based guess, the others
random points around it): at least ``n_starts`` (and at least as many as the
model has free rates, up to 5), then more, up to ``max_starts``, while the two
best disagree. The fit is called converged when
at least two starts reach the best log-likelihood within ``AGREE_TOL``. A start
that comes within ``SAME_X`` (every coordinate) and ``SAME_F`` (ln L) of an
earlier start's optimum stops there: it has reached a known optimum, and
polishing it would find that optimum again (10-16% fewer evaluations per fit on
simulated 60- to 200-tip data; the same estimates, tests/test_starts.py).
A fit depends only on (tree, data, model, root, seed): never on other trees,
on run order or on how the work is split.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, field

import numba
import numpy as np
from scipy.special import chdtri

from .branches import (
    _DPHI,
    _PHI,
    NULL_VALUE,
    Transform,
    Treatment,
    _transform,
    transformed_tree,
    with_lengths,
)
from .gradient import _PHI1, FD_STEP, Evaluator, _evaluate_rates
from .hidden import relabel_classes, spread_classes
from .lbfgsb import minimise
from .likelihood import _MAX_EIGEN_CONDITION, log_likelihood, prune, root_weights
from .search import (
    AGREE_TOL,
    LOWER,
    MAX_STARTS,
    MIN_STARTS,
    RATE_STARTS,
    SAME_F,
    SAME_X,
    UPPER,
)

# Objective value where the data are impossible under the rates tried (e.g. an
# irreversible loss so fast that exp(-rate t) underflows). Large but finite, so
# the line search backs off instead of failing on inf.
_IMPOSSIBLE = 1e8


@dataclass
class FitResult:
    model_name: str
    log_likelihood: float
    rates: np.ndarray  # free rates, in ``labels`` order
    labels: tuple
    n_params: int
    converged: bool
    n_starts: int
    n_agree: int  # starts within AGREE_TOL of the best
    at_lower: tuple  # labels of rates at the lower bound (effectively zero)
    at_upper: tuple  # labels of rates at the upper bound, or moving with one there
    # (change too fast to estimate; only their ratios are)
    root: str
    q_matrix: np.ndarray = None
    notes: list = field(default_factory=list)
    start_log_likelihoods: tuple = ()  # the best ln L each start reached, in start order
    open_upper: tuple = ()  # labels of rates inside the bounds whose 95% likelihood interval
    # reaches the upper bound: the data do not bound them from above

    @property
    def unbounded(self) -> tuple:
        """Labels of rates the data do not bound from above (at_upper, then open_upper)."""
        return self.at_upper + tuple(x for x in self.open_upper if x not in self.at_upper)

    branches: str = "as_given"  # the treatment's label (mkforest.engine.branches)
    branch_parameter: float = math.nan  # its estimate (or fixed value); nan when it has none
    branch_at_bound: str = ""  # "lower" / "upper" when the estimate is at a bound

    def rate_of(self, label: str) -> float:
        return float(self.rates[self.labels.index(label)])


class LogLikelihood:
    """ln L as a function of a model's free rates, for one tree and one trait."""

    def __init__(self, tree, tip_partials, model, root="uniform"):
        self.tree = tree
        self.tip_partials = np.ascontiguousarray(model.expand_tips(tip_partials), dtype=np.float64)
        self.model = model
        self.root = root
        root_weights(root, model.q_matrix(np.ones(model.n_params)), np.ones(model.k), model.states)

    def __call__(self, rates) -> float:
        Q = self.model.q_matrix(rates)
        partials, log_scale = prune(self.tree, self.tip_partials, Q)
        if partials is None:
            return -np.inf
        r = partials[self.tree.root]
        total = float(root_weights(self.root, Q, r, self.model.states) @ r)
        if total <= 0.0:
            return -np.inf
        return math.log(total) + float(log_scale[self.tree.root])


def fitch_score(tree, tip_partials) -> int:
    """Minimum number of changes (Fitch 1971), with tip state sets from tip_partials;
    at a polytomy, the states shared by the most children (Hartigan 1973)."""
    k = tip_partials.shape[1]
    bits = (np.asarray(tip_partials) > 0).astype(np.int64) @ (1 << np.arange(k, dtype=np.int64))
    return int(_fitch(tree.child_ptr, tree.children, tree.n_tips, bits, k))


@numba.njit(cache=True)
def _fitch(child_ptr, children, n_tips, tip_bits, k):
    n_nodes = child_ptr.shape[0] - 1
    sets = np.zeros(n_nodes, dtype=np.int64)
    sets[:n_tips] = tip_bits
    counts = np.zeros(k, dtype=np.int64)
    score = 0
    for v in range(n_tips, n_nodes):
        counts[:] = 0
        n_children = child_ptr[v + 1] - child_ptr[v]
        for p in range(child_ptr[v], child_ptr[v + 1]):
            c = children[p]
            for s in range(k):
                if (sets[c] >> s) & 1:
                    counts[s] += 1
        best = counts.max()
        chosen = 0
        for s in range(k):
            if counts[s] == best:
                chosen |= 1 << s
        sets[v] = chosen
        score += n_children - best
    return score


def _starting_rate(tree, tip_partials, model) -> float:
    k_obs = len(model.observed_states)
    X = np.asarray(tip_partials)
    if X.shape[1] != k_obs:  # a hidden-class model's combined states: back to observed
        X = model.collapse(X)
    changes = max(fitch_score(tree, X), 1)
    # a tree without length (every branch 0) has no time for change: any rate is as good a
    # start as another, and the fit says the data are impossible there
    total = tree.total_length if tree.total_length > 0 else 1.0
    return changes / (total * max(k_obs - 1, 1))


def _settle_at_bounds(f, x, ll, lo, hi, tol=1e-7):
    """Move each parameter that the optimiser left near a bound onto it when that
    does not lower ln L (``f`` of the optimiser's x) by more than ``tol``: on a
    likelihood that is flat towards zero (or towards saturation) the optimiser
    stops early, and the rate is then reported at the bound instead of at an
    arbitrary small value. lo, hi: one bound for all, or one per parameter."""
    x = x.copy()
    lo = np.broadcast_to(lo, x.shape)
    hi = np.broadcast_to(hi, x.shape)
    span = hi - lo
    for i in np.argsort(np.minimum(x - lo, hi - x)):
        for bound in (lo[i], hi[i]):
            if x[i] == bound or abs(x[i] - bound) > 0.5 * span[i]:
                continue
            trial = x.copy()
            trial[i] = bound
            t_ll = f(trial)
            if t_ll >= ll - tol:
                x, ll = trial, t_ll
    return x, ll


# ln L drop that still lies inside a one-rate 95% likelihood interval: chi2(0.95, 1 df) / 2
# (scipy.special's inverse survival function: scipy.stats would add ~0.3 s to every job's start)
OPEN_DROP = float(chdtri(1, 0.05)) / 2


def _settle_jointly_at_upper(f, x, ll, lo, hi, tol=1e-7):
    """(x, ll, tied, open): rates the data bound only in ratio, moved up with the
    bound, and rates whose 95% likelihood interval reaches the upper bound.

    When the data saturate (e.g. states that alternate between sisters), ln L
    rises towards a limit as a set of rates grows together, and the optimiser
    stops anywhere on that plateau (749, 8,707 or 150 times the tree height on
    the same data): moving one rate alone changes their ratio and lowers ln L, so
    ``_settle_at_bounds`` keeps them. Candidate sets are each rate alone and the
    m largest rates together (m = 1..p; rates at a bound left as they are); a set
    is shifted on the log scale until its largest rate reaches the upper bound.
    ``tied``: the largest set whose shift lowers ln L by at most ``tol`` (moved:
    only their ratios are estimated). ``open``: every rate of a set whose shift
    lowers ln L by less than OPEN_DROP, i.e. the rates' 95% likelihood interval
    (others held, or moved with them) reaches the bound: an estimate exists but
    the data do not bound it from above. Holding the other rates makes this a
    conservative check of the profile interval (the profile can only be higher).
    """
    free = [i for i in np.argsort(-x) if lo < x[i] < hi]
    sets = [tuple(free[:m]) for m in range(1, len(free) + 1)] + [(i,) for i in free[1:]]
    best, open_ = None, set()
    for chosen in sets:
        idx = list(chosen)
        trial = x.copy()
        trial[idx] += hi - x[idx].max()
        t_ll = f(np.exp(trial))
        if t_ll >= ll - OPEN_DROP:
            open_.update(chosen)
        if t_ll >= ll - tol and len(chosen) >= len(best[2] if best else ()):
            best = (trial, t_ll, chosen)
    if best is None:
        return x, ll, (), tuple(sorted(open_))
    return best[0], best[1], best[2], tuple(sorted(open_ - set(best[2])))


def start_sequence(
    tree, tip_partials, model, seed: int = 0, lower: float = LOWER, upper: float = UPPER
):
    """(starts, (lo, hi)): an endless iterator of starting log-rates and the
    log-rate bounds.

    The first start puts every rate at the parsimony-based guess; the others are
    seeded random points around it, kept one log-unit inside the bounds. Start i
    is the same however many are drawn, so a fit that needs more starts extends
    the same sequence."""
    p = model.n_params
    height = tree.height if tree.height > 0 else 1.0
    lo, hi = math.log(lower / height), math.log(upper / height)
    guess = math.log(
        min(
            max(_starting_rate(tree, tip_partials, model), lower / height * 10), upper / height / 10
        )
    )

    def starts():
        rng = np.random.default_rng(seed)
        # hidden classes: the first start spreads the classes apart (all classes equal is a
        # saddle that the optimiser would not leave)
        yield np.clip(spread_classes(model, np.full(p, guess)), lo, hi)
        while True:
            yield np.clip(guess + rng.normal(0.0, 1.5, p), lo + 1.0, hi - 1.0)

    return starts(), (lo, hi)


def starting_points(
    tree,
    tip_partials,
    model,
    n_starts: int = 5,
    seed: int = 0,
    lower: float = LOWER,
    upper: float = UPPER,
):
    """(the first ``n_starts`` of ``start_sequence``, (lo, hi))."""
    starts, bounds = start_sequence(tree, tip_partials, model, seed, lower, upper)
    return [next(starts) for _ in range(n_starts)], bounds


# ln L change per iteration (log-units, absolute) below which the rates-first descent
# of the null start stops: it only has to reach the basin, the joint descent polishes.
# It was 1e-2 relative to ln L: on a 400-tip tree (ln L -273) that stopped 12 log-units
# short of the given lengths' optimum, and the joint descent then ended 0.3 below it.
RATES_FIRST_DROP = 1e-2
# The optimiser's unit of each branch value (w = 1 moves x by this much): a unit step
# should change ln L about as much as a unit step of a log-rate. Chosen by measurement
# (benchmarks/bench_treatment_fits.py: objective evaluations per fit on two sets of
# simulated data): lambda's ln L is steep near 1 (tip branches are short next to
# their parents' depths), a H and ln delta are flat. (early_burst: 2 with the rates held
# to the geometric mean branch length, ``branches.HELD``; it was 3 with the total.)
BRANCH_SCALE = {"kappa": 1.0, "lambda": 0.2, "delta": 2.0, "early_burst": 2.0}


class _TreatmentSpace:
    """The optimiser's coordinates for a fit with an estimated treatment:
    z = (y_1..y_p, w), with rates exp(y) T / T'(x) and branch value x = null + s w.

    T and T' are a length of the given and of the transformed tree (the total of
    every branch; for delta the tip branches' total, for early_burst the geometric
    mean branch length: ``branches.HELD``): moving the branch parameter then keeps
    the expected number of changes about the same, so the two are nearly
    uncorrelated (the rates alone would move with the tree's total length). s is
    the branch value's unit (``BRANCH_SCALE``); w = 0 is the null value and the
    bounds of w map back onto the bounds of x exactly."""

    def __init__(self, tree, tip_partials, model, root, treatment):
        self.tree, self.tip_partials, self.model, self.root = tree, tip_partials, model, root
        self.treatment = treatment
        self.p = model.n_params
        self.null = NULL_VALUE[treatment.name]
        self.lo, self.hi = treatment.bounds()
        self.s = BRANCH_SCALE[treatment.name]
        self.bounds = ((self.lo - self.null) / self.s, (self.hi - self.null) / self.s)
        self.transform = Transform(tree, treatment)
        self.given = self.transform.given
        self.evaluate = Evaluator(tree, tip_partials, model, root)
        self.rate_buffer = np.empty(self.p)

    def branch_x(self, z) -> float:
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
                return _IMPOSSIBLE, np.zeros(p)
            return -ll, -grad

        _, y = _descend(objective, z0[:p], rate_bounds, drop=drop)
        return np.append(y, z0[p])

    def _lengths(self, x):
        """(lengths, d lengths / dx, ln(T / T'), d ln(T / T') / dx) at branch value x (no
        scaling where T or T' is 0)."""
        lengths, dl, total, dtotal = self.transform(x)
        if self.given <= 0.0 or total <= 0.0:
            return lengths, dl, 0.0, 0.0
        return lengths, dl, math.log(self.given / total), -dtotal / total

    def rates(self, z):
        return np.exp(z[: self.p] + self._lengths(self.branch_x(z))[2])

    def _one_call(self, z):
        """(status, lnL, objective gradient) from ``_treatment_objective``; status 3 where
        that path does not apply (the tree has no height, or the evaluator's one-call
        path does not)."""
        ev = self.evaluate
        if not ev.fused or self.transform.flat:
            return 3, 0.0, None
        tree, tr = self.tree, self.transform
        out = np.empty(self.p + 1)
        status, ll = _treatment_objective(
            z,
            self.p,
            self.s,
            self.bounds[0],
            self.bounds[1],
            self.null,
            self.lo,
            self.hi,
            tr.code,
            tree.length,
            tr.d,
            tr.log_t,
            tr.log_r,
            tree.parent,
            tree.n_tips,
            tr.H,
            _PHI,
            _DPHI,
            tr.held,
            tr.out,
            tr.deriv,
            self.given,
            self.rate_buffer,
            self.model.rate_index,
            ev.base,
            ev.Q,
            _MAX_EIGEN_CONDITION,
            tree.child_ptr,
            tree.children,
            ev.E1[False],
            ev.E1[True],
            ev.tips,
            ev.data_weighted,
            ev.weights,
            _PHI1,
            ev.root_partial,
            ev.grad,
            ev.dlen,
            out,
        )
        return status, ll, out

    def value(self, z) -> float:
        status, ll, _ = self._one_call(z)
        if status == 0:
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
        (``_treatment_objective``: on 150-tip trees the Python steps around it cost
        half as much as the likelihood itself)."""
        status, ll, out = self._one_call(z)
        if status == 0:
            return -ll, out
        p, ev = self.p, self.evaluate
        lengths, dl, shift, dshift = self._lengths(self.branch_x(z))
        ll, grad, dlen = ev(np.exp(z[:p] + shift), lengths)
        out = np.zeros(p + 1)
        if not np.isfinite(ll):
            return _IMPOSSIBLE, out
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


@numba.njit(cache=True)
def _treatment_objective(
    z,
    p,
    s,
    w_lo,
    w_hi,
    null,
    x_lo,
    x_hi,
    code,
    t,
    d,
    log_t,
    log_r,
    parent,
    n_tips,
    H,
    phi,
    dphi,
    held,
    lengths,
    dl,
    given,
    rates,
    rate_index,
    base,
    Q,
    max_condition,
    child_ptr,
    children,
    E1,
    E1c,
    tips,
    data_weighted,
    weights,
    coef,
    root_partial,
    grad,
    dlen,
    out,
):
    """``_TreatmentSpace.objective`` in one compiled call: branch value x from w, the
    transformed lengths, the rates exp(y) T / T', ``_evaluate_rates`` and the chain
    rule. Returns (status, lnL) with ``_evaluate_rates``' status; out = (-d lnL / dy,
    -d lnL / dw) when the status is 0."""
    w = z[p]
    x = x_lo if w == w_lo else (x_hi if w == w_hi else null + s * w)
    total, dtotal = _transform(
        code, t, d, log_t, log_r, parent, n_tips, H, x, phi, dphi, held, lengths, dl
    )
    shift, dshift = 0.0, 0.0
    if given > 0.0 and total > 0.0:
        shift = math.log(given / total)
        dshift = -dtotal / total
    for i in range(p):
        rates[i] = math.exp(z[i] + shift)
    status, ll = _evaluate_rates(
        rates,
        rate_index,
        base,
        Q,
        max_condition,
        child_ptr,
        children,
        n_tips,
        lengths,
        E1,
        E1c,
        tips,
        data_weighted,
        weights,
        coef,
        root_partial,
        grad,
        dlen,
    )
    if status != 0:
        return status, ll
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


def fit_model(
    tree,
    tip_partials,
    model,
    root="uniform",
    n_starts: int = MIN_STARTS,
    seed: int = 0,
    lower: float = LOWER,
    upper: float = UPPER,
    max_starts: int = MAX_STARTS,
    branches: Treatment | None = None,
    first_starts=(),
) -> FitResult:
    """Maximum-likelihood rates of ``model`` on one tree (see the module docstring).

    Runs the seeded starts in order: at least ``n_starts`` and min(free rates,
    RATE_STARTS); after that it stops as soon as the two best starts so far agree
    within AGREE_TOL, or when ``max_starts`` (raised to ``n_starts`` if lower)
    have run.

    tip_partials are over the observed states (or already over a hidden-class
    model's combined states); the classes of a hidden-class model come back
    numbered slowest first (mkforest.engine.hidden).

    branches: the branch-length treatment (mkforest.engine.branches); a fixed or
    parameter-free one transforms the tree once, an estimated one adds its
    parameter to the optimiser's (bounds in ``branches.BOUNDS``).

    first_starts: rate vectors (in ``model.labels`` order, clipped into the bounds)
    tried before the seeded starts and counted among them, e.g. a nested model's
    optimum: the fit then ends at least as high as that point."""
    treatment = branches or Treatment()
    if not treatment.free:
        tree = transformed_tree(tree, treatment)
    f = LogLikelihood(tree, tip_partials, model, root)
    p = model.n_params
    q = treatment.n_params
    fixed = treatment.fixed if treatment.fixed is not None else math.nan
    if p + q == 0:
        ll = f(np.zeros(0))
        return FitResult(
            model.name,
            ll,
            np.zeros(0),
            model.labels,
            0,
            np.isfinite(ll),
            1,
            1,
            (),
            (),
            root,
            model.q_matrix(np.zeros(0)),
            branches=treatment.label,
            branch_parameter=fixed,
        )
    starts, (lo, hi) = start_sequence(tree, tip_partials, model, seed, lower, upper)
    if len(first_starts):
        given = [
            np.clip(np.log(np.maximum(np.asarray(r, dtype=float), 1e-300)), lo, hi)
            for r in first_starts
        ]
        starts = itertools.chain(given, starts)
    max_starts = max(max_starts, n_starts)
    least = min_starts(model.n_params, n_starts, max_starts)
    bounds = [(lo, hi)] * p

    if q:
        space = _TreatmentSpace(tree, f.tip_partials, model, root, treatment)
        starts = space.starts(starts, seed)
        bounds.append(space.bounds)
        objective, value = space.objective, space.value
    else:
        evaluate = Evaluator(tree, f.tip_partials, model, root)

        def objective(x):
            # exact gradient (mkforest.engine.gradient), in log-rate space
            ll, grad, _ = evaluate(np.exp(x))
            if not np.isfinite(ll):
                return _IMPOSSIBLE, np.zeros(p)
            return -ll, -grad

        def value(x):
            return f(np.exp(x))

    results = []
    for x0 in starts:
        if q and not results:
            x0 = space.rates_first(x0, bounds[:p])
        results.append(_descend(objective, x0, bounds, known=results))
        if len(results) >= max_starts:
            break
        if len(results) >= least and _best_two_agree(results):
            break
    run = len(results)
    best_fun, best_x = min(results, key=lambda r: r[0])
    ll = -best_fun if best_fun < _IMPOSSIBLE else -np.inf
    n_agree = sum(1 for r in results if r[0] - best_fun <= AGREE_TOL)
    notes = []
    if not np.isfinite(ll):
        notes.append(f"the data are impossible under this model at every start ({run} tried)")
    converged = bool(np.isfinite(ll) and (n_agree >= 2 or max_starts == 1))
    if np.isfinite(ll) and n_agree < 2 and max_starts > 1:
        notes.append(f"only 1 of {run} starts reached the best log-likelihood")
    tied = open_ = ()
    if np.isfinite(ll):
        best_x, ll = _settle_at_bounds(
            value, best_x, ll, [b[0] for b in bounds], [b[1] for b in bounds]
        )
        tied, open_ = (), ()
        if not q:  # rates that move together at the upper bound
            best_x, ll, tied, open_ = _settle_jointly_at_upper(f, best_x, ll, lo, hi)
        else:  # the same, with the branch value held at its estimate (scaled log-rates)
            w = best_x[p:]

            def at_w(rates):
                return value(np.concatenate([np.log(rates), w]))

            y, ll, tied, open_ = _settle_jointly_at_upper(at_w, best_x[:p], ll, lo, hi)
            best_x = np.concatenate([y, w])
    else:
        tied, open_ = (), ()
    # hidden rate classes: number the classes slowest first (same ln L, same meaning on every tree)
    rates = space.rates(best_x) if q else np.exp(best_x)
    order = relabel_classes(model, rates)
    best_x = np.concatenate([best_x[:p][order], best_x[p:]])
    rates = rates[order]
    tied = tuple(j for j in range(p) if order[j] in tied)
    open_ = tuple(j for j in range(p) if order[j] in open_)
    at_lower = tuple(model.labels[i] for i in range(p) if best_x[i] == lo)
    at_upper = tuple(model.labels[i] for i in range(p) if best_x[i] == hi or i in tied)
    open_upper = tuple(model.labels[i] for i in open_ if model.labels[i] not in at_upper)
    per_start = tuple(-r[0] if r[0] < _IMPOSSIBLE else -np.inf for r in results)
    theta, side = fixed, ""
    if q:
        xb = space.branch_x(best_x)
        theta = treatment.theta(xb, tree)
        side = "lower" if xb == space.lo else ("upper" if xb == space.hi else "")
    if not np.isfinite(ll):
        # no rates make the data possible: the optimiser's last point is no estimate
        rates = np.full(p, np.nan)
        theta, side = (math.nan if q else theta), ""
        n_agree = 0
    return FitResult(
        model.name,
        ll,
        rates,
        model.labels,
        p + q,
        converged,
        run,
        n_agree,
        at_lower,
        at_upper,
        root,
        model.q_matrix(rates),
        notes,
        per_start,
        open_upper,
        treatment.label,
        theta,
        side,
    )


SCALE_FIRST_STEP = True


def _descend(objective, x0, bounds, ftol=1e-10, known=(), drop=None):
    """(lowest objective, its x): one L-BFGS-B run from x0.

    With every variable bounded, L-BFGS-B's first step is the whole (projected)
    negative gradient, and far from the optimum the gradient of ln L is tens of
    log-units: one step can throw the rates onto the plateau where every tip is
    independent of the tree (ln L = -n ln k, gradient zero) and the run stops
    there, although a better optimum lies near the start. Dividing the objective
    by its largest gradient entry at x0 (when above 1) makes that first step at
    most one unit in every parameter; later steps follow the curvature the
    optimiser learns and do not depend on the scale. The gradient tolerance is
    divided alike, so the stopping rule is that of the unscaled objective.

    drop: stop when an iteration lowers the objective by less than this (absolute,
    about: L-BFGS-B's rule is relative, so ftol becomes drop / |objective at x0|)
    instead of ``ftol``.

    known: (objective, x) of the fit's earlier starts. The run stops at an iterate
    within ``SAME_X`` of one of those optima in every coordinate and within
    ``SAME_F`` of its value: it has reached a basin whose optimum is known, and
    polishing it would only find that optimum again."""
    f0, g0 = objective(x0)
    if drop is not None:
        ftol = drop / max(abs(f0), 1.0)
    lo = np.array([b[0] for b in bounds])
    hi = np.array([b[1] for b in bounds])
    # the first step is the gradient projected on the box: a component pushing
    # against a bound the start already sits on does not move
    free = ~(((x0 <= lo) & (g0 > 0)) | ((x0 >= hi) & (g0 < 0)))
    c = max(1.0, float(np.max(np.abs(g0[free]), initial=0.0))) if SCALE_FIRST_STEP else 1.0
    # every point tried, unscaled, keyed by its bytes (a list scanned per call made
    # each descent quadratic in its number of evaluations)
    seen = {np.asarray(x0, dtype=float).tobytes(): (f0, g0)}

    def scaled(x):
        key = np.asarray(x, dtype=float).tobytes()
        if key not in seen:
            seen[key] = objective(x)
        f, g = seen[key]
        return f / c, g / c

    def reached_known(x):
        f = seen.get(x.tobytes())
        return f is not None and any(
            abs(f[0] - fk) <= SAME_F and float(np.max(np.abs(x - xk))) <= SAME_X for fk, xk in known
        )

    x = minimise(
        scaled,
        x0,
        lo,
        hi,
        ftol=ftol,
        gtol=1e-6 / c,
        maxiter=1000,
        stop=reached_known if len(known) else None,
    )
    # the unscaled value at the point returned (f / c * c need not round back to f)
    key = np.asarray(x, dtype=float).tobytes()
    return (seen[key][0] if key in seen else objective(x)[0]), x


def min_starts(n_params: int, n_starts: int = MIN_STARTS, max_starts: int = MAX_STARTS) -> int:
    """Starts a fit runs before it may stop: n_starts, and min(n_params, RATE_STARTS),
    never above max_starts."""
    return min(max(max_starts, n_starts), max(n_starts, min(n_params, RATE_STARTS)))


def _best_two_agree(results) -> bool:
    """The two lowest objective values are within AGREE_TOL of each other."""
    a, b = sorted(r[0] for r in results)[:2]
    return b - a <= AGREE_TOL
