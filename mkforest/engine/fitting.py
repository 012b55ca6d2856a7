"""Maximum-likelihood fits of a rate model on one tree.

Rates are optimised on the log scale within bounds set relative to the tree's
height H: every rate lies in [lower/H, upper/H] (by default 1e-6 and 1e4
expected changes along a root-to-tip path). Starts are tried one after another
in a fixed seeded order (the first at a parsimony-based guess, the others
random points around it): at least ``n_starts`` (and at least as many as the
model has free rates, up to 5), then more, up to ``max_starts``, while the two
best disagree. Before it accepts two agreeing starts, each rate that the best
optimum holds at zero (within ``ZERO_MARGIN`` log-units of the lower bound) is
lifted back, one at a time, to its value at the first start, and one descent runs
from there: two starts can agree on an optimum where one set of rates is zero
while the best optimum sets another set to zero (a 9-tip tree given three times
gave three optima; benchmarks/agreement.py). A lift that finds a better optimum
joins the starts (the starts then go on until the two best agree again), one that
does not is dropped, so the reported ln L is never lower than without the lifts.
When the lifts find nothing, the same is done from the best optimum's rates moved to
their bounds (``_probe_bounds``: saturated rates at the upper bound, where their ratio
is set; every rate there; the smallest rates above zero at zero): the better optimum
may differ in which rates are zero, or in the ratio of rates so fast that only their
ratio matters.
The fit is called converged when
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

from .branches import Treatment, transformed_tree
from .descent import IMPOSSIBLE_OBJECTIVE, descend
from .gradient import Evaluator
from .hidden import relabel_classes, spread_classes
from .likelihood import prune, root_weights
from .search import (
    AGREE_TOL,
    LOWER,
    MAX_STARTS,
    MIN_STARTS,
    RATE_STARTS,
    UPPER,
    ZERO_MARGIN,
    ZERO_PROBES,
)
from .treatment_search import TreatmentSpace


@dataclass
class FitResult:
    """One ML fit of one model on one tree: ln L, the estimates, and how far to trust them."""

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
        """The estimate of the free rate named ``label``."""
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
# How far past the upper bound rates at it are moved, with others, to tell whether the data
# fix only their ratios (log-units)
BEYOND = 2.0


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
    Rates inside the box are also ``tied`` when, moved ``BEYOND`` the bound together
    with the rates already at it, they do not lower ln L: their value is only the
    bound divided by a ratio the data fix.
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
    x, ll, tied = (best[0], best[1], best[2]) if best else (x, ll, ())
    # rates inside the box of which the data fix only the ratio to rates already at the
    # bound: the set moved further up together (past the box: ln L is defined there)
    # does not lower ln L
    top = [i for i in range(len(x)) if x[i] >= hi]
    inside = [i for i in free if x[i] < hi]
    for m in range(1, len(inside) + 1) if top else ():
        trial = x.copy()
        trial[top + inside[:m]] += BEYOND
        if f(np.exp(trial)) >= ll - tol:
            tied = tuple(sorted(set(tied) | set(inside[:m])))
    return x, ll, tuple(sorted(tied)), tuple(sorted(open_ - set(tied)))


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
    parameter to the optimiser's (bounds: the registry's ``box``).

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
        return _nothing_to_fit(f, treatment)
    starts, (lo, hi) = start_sequence(tree, tip_partials, model, seed, lower, upper)
    if len(first_starts):
        given = [
            np.clip(np.log(np.maximum(np.asarray(r, dtype=float), 1e-300)), lo, hi)
            for r in first_starts
        ]
        starts = itertools.chain(given, starts)
    max_starts = max(max_starts, n_starts)
    least = min_starts(model.n_params, n_starts, max_starts)
    space, starts, bounds, objective, value = _search_space(f, treatment, starts, seed, lo, hi)
    results = _run_starts(space, starts, objective, bounds, least, max_starts, p, len(first_starts))
    run = len(results)
    best_fun, best_x = min(results, key=lambda r: r[0])
    ll = -best_fun if best_fun < IMPOSSIBLE_OBJECTIVE else -np.inf
    n_agree = sum(1 for r in results if r[0] - best_fun <= AGREE_TOL)
    notes = []
    if not np.isfinite(ll):
        notes.append(f"the data are impossible under this model at every start ({run} tried)")
    converged = bool(np.isfinite(ll) and (n_agree >= 2 or max_starts == 1))
    if np.isfinite(ll) and n_agree < 2 and max_starts > 1:
        notes.append(f"only 1 of {run} starts reached the best log-likelihood")
    tied = open_ = ()
    if np.isfinite(ll):
        best_x, ll, tied, open_ = _settle(f, value, best_x, ll, bounds, (lo, hi), p, q)
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
    per_start = tuple(-r[0] if r[0] < IMPOSSIBLE_OBJECTIVE else -np.inf for r in results)
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


def _nothing_to_fit(f, treatment) -> FitResult:
    """The fit of a model without free rates on a tree without an estimated treatment."""
    model = f.model
    fixed = treatment.fixed if treatment.fixed is not None else math.nan
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
        f.root,
        model.q_matrix(np.zeros(0)),
        branches=treatment.label,
        branch_parameter=fixed,
    )


def _search_space(f, treatment, starts, seed, lo, hi):
    """(treatment space or None, starts, bounds, objective, value) of the search: log-rates
    in [lo, hi], and with an estimated treatment its branch value (``TreatmentSpace``)."""
    model, p = f.model, f.model.n_params
    bounds = [(lo, hi)] * p
    if treatment.n_params:
        space = TreatmentSpace(f.tree, f.tip_partials, model, f.root, treatment)
        bounds.append(space.bounds)
        return space, space.starts(starts, seed), bounds, space.objective, space.value
    evaluate = Evaluator(f.tree, f.tip_partials, model, f.root)

    def objective(x):
        # exact gradient (mkforest.engine.gradient), in log-rate space
        ll, grad, _ = evaluate(np.exp(x))
        if not np.isfinite(ll):
            return IMPOSSIBLE_OBJECTIVE, np.zeros(p)
        return -ll, -grad

    def value(x):
        return f(np.exp(x))

    return None, starts, bounds, objective, value


def _run_starts(space, starts, objective, bounds, least, max_starts, n_rates, n_given=0) -> list:
    """(objective, x) of each start run, in order, until the two best agree (after
    ``least`` starts) and lifting the best optimum's zero rates finds nothing better
    (``_release_zeros``; a lift that does joins the list), or ``max_starts`` have run;
    with a treatment the first start's rates are first brought near their optimum
    (``TreatmentSpace.rates_first``). n_rates: the leading coordinates that are log-rates;
    n_given: starts given before the seeded ones (a zero rate is lifted to its value at the
    first seeded start, the parsimony-based guess)."""
    results = []
    probed = set()
    first = None
    for x0 in starts:
        if space is not None and not results:
            x0 = space.rates_first(x0, bounds[: space.p])
        if len(results) == n_given:
            first = x0
        results.append(descend(objective, x0, bounds, known=results))
        if len(results) >= max_starts:
            break
        if len(results) >= least and _best_two_agree(results):
            if not RELEASE_ZEROS:
                break
            found = _release_zeros(objective, results, bounds, n_rates, first, probed)
            if found is None and PROBE_BOUNDS and n_rates >= 2:
                found = _probe_bounds(objective, results, bounds, n_rates, first, probed)
            if found is None:
                break
            results.append(found)
            if len(results) >= max_starts:
                break
    return results


# False: accept two agreeing starts without lifting the best optimum's zero rates
# (benchmarks/agreement.py compares the two).
RELEASE_ZEROS = True


def _release_zeros(objective, results, all_bounds, n_rates, first, probed):
    """(objective, x) of a better optimum found by lifting, one at a time, each rate of
    the best optimum that sits at its lower bound back to its value at the first start
    and descending from there; None when no such descent ends more than AGREE_TOL
    above the best. ``probed`` holds the optima already tried (each is tried once)."""
    best_f, best_x = min(results, key=lambda r: r[0])
    key = best_x.tobytes()
    if first is None or key in probed:  # no seeded start run yet: nothing to lift to
        return None
    probed.add(key)
    for i, (lo, _) in enumerate(all_bounds[:n_rates]):
        if best_x[i] > lo + ZERO_MARGIN or first[i] <= lo + ZERO_MARGIN:
            continue
        x0 = best_x.copy()
        x0[i] = first[i]
        f, x = descend(objective, x0, all_bounds, known=results)
        if f < best_f - AGREE_TOL:
            return f, x
    return None


# False: accept the best optimum without the bound probes (``_probe_bounds``;
# benchmarks/agreement.py compares the two).
PROBE_BOUNDS = True
# The probes tried, in order (benchmarks/agreement.py measures each).
PROBES = ("saturation", "corner", "zeros")


def _probe_bounds(objective, results, all_bounds, n_rates, first, probed):
    """(objective, x) of a better optimum found from the best optimum by moves at the
    bounds of its rates, each followed by one descent and kept only when it ends more
    than AGREE_TOL above the best (so ln L is never lower than without them); None when
    none does. Tried once per best optimum, in this order, stopping at the first that
    gains:

    1. saturation: the m largest rates inside the box (m = 1..p) shifted together on
       the log scale until the largest reaches the upper bound, keeping the shift that
       raises ln L most, if one does. Where the data saturate, ln L depends only on the
       ratios of those rates, and the descent from there sets their ratio at the bound
       (starts end at an optimum inside the box, and ``_settle_jointly_at_upper`` alone
       would move it up with the ratio it had there).
    2. corner: every rate at the upper bound (equal rates), where the descent finds the
       best ratios of saturated rates that the best optimum holds at zero.
    3. zeros: each of the ``ZERO_PROBES`` smallest rates above zero (beyond
       ``ZERO_MARGIN``) set to the lower bound: the better optimum may hold other rates
       at zero, or more of them (``_release_zeros`` only lifts).
    ``PROBES`` names the moves tried (benchmarks/agreement.py measures each). Models
    with one free rate are not probed: the moves cost about as much as the fit
    (benchmarks/bench_reference.py), and benchmarks/agreement.py measures the gain on
    models with two or more."""
    best_f, best_x = min(results, key=lambda r: r[0])
    key = b"bounds" + best_x.tobytes()
    if first is None or key in probed or best_f >= IMPOSSIBLE_OBJECTIVE:
        return None  # no seeded start yet, probed already, or the data impossible
    probed.add(key)
    lo = np.array([b[0] for b in all_bounds[:n_rates]])
    hi = np.array([b[1] for b in all_bounds[:n_rates]])
    x = best_x[:n_rates]
    trials = []
    inside = [i for i in np.argsort(-x) if lo[i] < x[i] < hi[i]] if "saturation" in PROBES else []
    shifted = []
    for m in range(1, len(inside) + 1):
        idx = inside[:m]
        x0 = best_x.copy()
        x0[idx] += float(np.min(hi[idx] - x[idx]))
        shifted.append((objective(x0)[0], m, x0))
    if shifted:
        f0, _, x0 = min(shifted, key=lambda r: (r[0], r[1]))
        if f0 < best_f:
            trials.append(x0)
    if "corner" in PROBES:
        x0 = best_x.copy()
        x0[:n_rates] = hi
        trials.append(x0)
    zeros = [i for i in np.argsort(x) if x[i] > lo[i] + ZERO_MARGIN] if "zeros" in PROBES else []
    for i in zeros[:ZERO_PROBES]:
        x0 = best_x.copy()
        x0[i] = lo[i]
        trials.append(x0)
    for x0 in trials:
        f, xf = descend(objective, x0, all_bounds, known=results)
        if f < best_f - AGREE_TOL:
            return f, xf
    return None


def _settle(f, value, best_x, ll, bounds, rate_box, p, q):
    """(x, lnL, tied, open) at the best optimum with rates settled at their bounds:
    each alone (``_settle_at_bounds``), then rates that move together at the upper
    bound (with a treatment, its branch value held at its estimate)."""
    lo, hi = rate_box
    best_x, ll = _settle_at_bounds(
        value, best_x, ll, [b[0] for b in bounds], [b[1] for b in bounds]
    )
    if not q:  # rates that move together at the upper bound
        return _settle_jointly_at_upper(f, best_x, ll, lo, hi)
    w = best_x[p:]  # the same, with the branch value held at its estimate (scaled log-rates)

    def at_w(rates):
        return value(np.concatenate([np.log(rates), w]))

    y, ll, tied, open_ = _settle_jointly_at_upper(at_w, best_x[:p], ll, lo, hi)
    return np.concatenate([y, w]), ll, tied, open_


def min_starts(n_params: int, n_starts: int = MIN_STARTS, max_starts: int = MAX_STARTS) -> int:
    """Starts a fit runs before it may stop: n_starts, and min(n_params, RATE_STARTS),
    never above max_starts."""
    return min(max(max_starts, n_starts), max(n_starts, min(n_params, RATE_STARTS)))


def _best_two_agree(results) -> bool:
    """The two lowest objective values are within AGREE_TOL of each other."""
    a, b = sorted(r[0] for r in results)[:2]
    return b - a <= AGREE_TOL
