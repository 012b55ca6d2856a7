"""Stochastic character mapping (Nielsen 2002, Syst. Biol. 51:729; Huelsenbeck,
Nielsen & Bollback 2003, Syst. Biol. 52:131).

One map is a full history of the trait on the tree, drawn from its posterior
given the tip data, the rate matrix Q and the root treatment:

1. Node states, jointly: the root from its marginal posterior
   Pr(x_root = i | data) ∝ pi_i D_root(i), then every other node, parents
   before children, from Pr(x_v = j | x_parent = i, data) ∝ P_v(i, j) D_v(j)
   (D: the down-pass conditional likelihoods, ``likelihood.prune``).
2. A history along each branch conditioned on its two end states, by
   uniformisation (Jensen 1953; the sampler of Hobolth & Stone 2009, Ann. Appl.
   Stat. 3:1204, section on uniformisation -- from memory): with
   mu = max_i(-q_ii) and R = I + Q/mu, P(t) = sum_n Pois(n; mu t) R^n, so
     n (number of jumps, real or virtual) ~ Pois(n; mu t) R^n(a, b) / P_ab(t),
     jump times are n uniform order statistics on (0, t),
     the state after jump m is s with probability R(c, s) R^(n-m)(s, b) / R^(n-m+1)(c, b),
   and jumps that do not change the state are dropped. Every quantity is a sum
   of non-negative terms, so there is no cancellation and no rejection loop.
   Long or fast branches (mu t > SEGMENT_JUMPS) are cut into m equal segments;
   the states at the cuts are drawn from the end-conditioned transition
   probabilities P_cs(tau) P_sb((m-i) tau) / P_cb((m-i+1) tau) and each segment
   is then uniformised. This is exact at any branch length and keeps the
   tables of R^n short; the cost stays proportional to mu t, the expected
   number of jumps, which no sampler can avoid.

The transition matrices used to draw node states are the same uniformisation
series (truncated where the Poisson tail is below 1e-40), so the node draws
and the branch draws are consistent to rounding.

Randomness comes only from the numpy Generator passed in (numba draws from it
directly), so maps are reproduced exactly from a seed.

Output per map: ``counts[m, i, j]`` the number of i -> j changes over the whole
tree, ``dwell[m, i]`` the total branch length spent in state i (sums to the
tree length), and ``node_states[m, v]`` the sampled state of every node.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numba
import numpy as np

from .ancestral import passes

# Largest expected number of uniformised jumps on one segment of a branch.
SEGMENT_JUMPS = 40.0
# R^n is tabulated up to this n: Pr(Pois(40) > 160) < 1e-40.
_MAX_POWER = 160


@dataclass
class MapSet:
    """Stochastic maps of one trait on one tree.

    counts       int64 [n_maps, k, k]    number of i -> j changes on the whole tree (diagonal 0)
    dwell        float64 [n_maps, k]     branch length spent in each state (rows sum to the tree length)
    node_states  int64 [n_maps, n_nodes] sampled state at every node (tips 0..n_tips-1)
    model        int64 [n_maps]          which of the models given each map was drawn under
    """

    counts: np.ndarray
    dwell: np.ndarray
    node_states: np.ndarray
    model: np.ndarray

    @property
    def n_maps(self) -> int:
        """Number of stochastic maps drawn."""
        return self.counts.shape[0]

    @property
    def n_changes(self) -> np.ndarray:
        """Total number of changes on the tree, per map."""
        return self.counts.sum(axis=(1, 2))


# --------------------------------------------------------------------------- tables


def uniformisation(Q):
    """(mu, R^n for n = 0.._MAX_POWER): mu = max_i(-q_ii), R = I + Q/mu (all entries >= 0)."""
    Q = np.asarray(Q, dtype=np.float64)
    k = Q.shape[0]
    mu = float(np.max(-np.diag(Q)))
    powers = np.empty((_MAX_POWER + 1, k, k))
    powers[0] = np.eye(k)
    if mu <= 0.0:
        powers[1:] = np.eye(k)
        return 0.0, powers
    R = np.eye(k) + Q / mu
    np.maximum(R, 0.0, out=R)  # the diagonal can be -1e-17 at the fastest state
    R /= R.sum(axis=1, keepdims=True)
    for n in range(1, _MAX_POWER + 1):
        powers[n] = powers[n - 1] @ R
    return mu, powers


@numba.njit(cache=True)
def _series(powers, x, out):
    """out = sum_n Pois(n; x) R^n (the transition matrix exp(Q t) with x = mu t)."""
    k = out.shape[0]
    for i in range(k):
        for j in range(k):
            out[i, j] = 0.0
    pois = math.exp(-x)
    for n in range(powers.shape[0]):
        if pois == 0.0 and n > x:
            break
        for i in range(k):
            for j in range(k):
                out[i, j] += pois * powers[n, i, j]
        pois *= x / (n + 1)


@numba.njit(cache=True)
def _branch_tables(length, mu, powers, n_seg, seg_ptr, Ppow):
    """For every branch v with n_seg[v] segments of length tau_v = t_v / n_seg[v]:
    Ppow[seg_ptr[v] + j - 1] = P(j tau_v) for j = 1..n_seg[v]."""
    k = powers.shape[1]
    for v in range(length.shape[0]):
        m = n_seg[v]
        tau = length[v] / m
        base = seg_ptr[v]
        _series(powers, mu * tau, Ppow[base])
        for j in range(1, m):
            for a in range(k):
                for b in range(k):
                    s = 0.0
                    for c in range(k):
                        s += Ppow[base + j - 1, a, c] * Ppow[base, c, b]
                    Ppow[base + j, a, b] = s


@numba.njit(cache=True)
def _draw(rng, weights):
    """Index i with probability weights[i] / sum(weights)."""
    total = 0.0
    for i in range(weights.shape[0]):
        total += weights[i]
    u = rng.random() * total
    acc = 0.0
    last = -1
    for i in range(weights.shape[0]):
        if weights[i] > 0.0:
            last = i
            acc += weights[i]
            if u < acc:
                return i
    return last


@numba.njit(cache=True)
def _segment(rng, a, b, t, mu, powers, Pt, counts, dwell, times, w):
    """Draw the history on a segment of length t from state a to state b (uniformisation);
    add its changes to counts[k, k] and its dwell times to dwell[k]."""
    if t == 0.0 or mu == 0.0:
        dwell[a] += t
        return
    k = powers.shape[1]
    top = powers.shape[0] - 1
    x = mu * t
    u = rng.random() * Pt[a, b]
    pois = math.exp(-x)
    acc = 0.0
    n = 0
    last = -1
    while True:
        term = pois * powers[n, a, b]
        if term > 0.0:
            last = n
            acc += term
            if u < acc:
                break
        if n == top:
            n = last  # rounding left u just above the sum: take the last possible n
            break
        n += 1
        pois *= x / n
    if n <= 0:
        dwell[a] += t
        return
    # n uniform order statistics on (0, t) from n + 1 exponential spacings
    s = 0.0
    for i in range(n + 1):
        s += rng.standard_exponential()
        times[i] = s
    scale = t / times[n]
    c = a
    prev = 0.0
    for i in range(n):
        left = n - 1 - i  # jumps still to come after this one
        if left == 0:
            d = b
        else:
            for j in range(k):
                w[j] = powers[1, c, j] * powers[left, j, b]
            d = _draw(rng, w)
        if d != c:
            when = times[i] * scale
            dwell[c] += when - prev
            prev = when
            counts[c, d] += 1
            c = d
    dwell[c] += t - prev


@numba.njit(cache=True)
def _map_kernel(
    rng,
    parent,
    mu,
    powers,
    n_seg,
    seg_ptr,
    tau,
    Ppow,
    node_weights,
    root_post,
    counts,
    dwell,
    node_states,
):
    n = parent.shape[0]
    k = root_post.shape[0]
    times = np.empty(powers.shape[0] + 1)
    w = np.empty(k)
    for m in range(counts.shape[0]):
        state = node_states[m]
        state[n - 1] = _draw(rng, root_post)
        for v in range(n - 2, -1, -1):
            state[v] = _draw(rng, node_weights[v, state[parent[v]]])
        for v in range(n - 1):
            a = state[parent[v]]
            b = state[v]
            segs = n_seg[v]
            base = seg_ptr[v]
            if segs == 1:
                _segment(rng, a, b, tau[v], mu, powers, Ppow[base], counts[m], dwell[m], times, w)
                continue
            c = a
            for i in range(1, segs + 1):
                if i == segs:
                    d = b
                else:
                    rest = Ppow[base + segs - i - 1]  # P((segs - i) tau)
                    for j in range(k):
                        w[j] = Ppow[base, c, j] * rest[j, b]
                    d = _draw(rng, w)
                _segment(rng, c, d, tau[v], mu, powers, Ppow[base], counts[m], dwell[m], times, w)
                c = d


# --------------------------------------------------------------------------- public API


def _prepare(tree, tip_partials, Q, root, states):
    ps = passes(tree, tip_partials, Q, root, states)
    mu, powers = uniformisation(Q)
    n_seg = np.maximum(1, np.ceil(mu * tree.length / SEGMENT_JUMPS)).astype(np.int64)
    seg_ptr = np.zeros(tree.n_nodes + 1, dtype=np.int64)
    np.cumsum(n_seg, out=seg_ptr[1:])
    k = powers.shape[1]
    Ppow = np.empty((int(seg_ptr[-1]), k, k))
    _branch_tables(tree.length, mu, powers, n_seg, seg_ptr, Ppow)
    P = Ppow[seg_ptr[1:] - 1]  # P(t_v) for every branch
    node_weights = P * ps.down[:, None, :]
    root_post = ps.root_prior * ps.down[tree.root]
    root_post = root_post / root_post.sum()
    tau = tree.length / n_seg
    return (
        mu,
        powers,
        n_seg,
        seg_ptr[:-1].copy(),
        tau,
        Ppow,
        np.ascontiguousarray(node_weights),
        root_post,
    )


def stochastic_maps(tree, tip_partials, Q, n_maps: int, rng, root="uniform", states=None) -> MapSet:
    """``n_maps`` stochastic maps under one rate matrix (see the module docstring).

    rng: a numpy Generator (seed it for reproducible maps). Raises
    ancestral.ImpossibleData when the data are impossible under Q.
    """
    Q = np.asarray(Q, dtype=np.float64)
    k = Q.shape[0]
    mu, powers, n_seg, seg_ptr, tau, Ppow, node_weights, root_post = _prepare(
        tree, tip_partials, Q, root, states
    )
    counts = np.zeros((n_maps, k, k), dtype=np.int64)
    dwell = np.zeros((n_maps, k))
    node_states = np.zeros((n_maps, tree.n_nodes), dtype=np.int64)
    if n_maps > 0:
        _map_kernel(
            rng,
            tree.parent,
            mu,
            powers,
            n_seg,
            seg_ptr,
            tau,
            Ppow,
            node_weights,
            root_post,
            counts,
            dwell,
            node_states,
        )
    return MapSet(counts, dwell, node_states, np.zeros(n_maps, dtype=np.int64))


def mixed_stochastic_maps(
    tree, tip_partials, fits, n_maps: int, rng, states=None, skip=None
) -> MapSet:
    """Maps under a mixture of models: each map's model is drawn with probability
    proportional to its weight (e.g. Akaike weights), then the map under it.

    fits: list of (Q, root, weight) or (Q, root, weight, RateModel). ``MapSet.model`` holds
    each map's index in fits. A model with hidden rate classes is mapped on its combined
    states and the maps are reported over the observed states: changes of state within a
    class are counted (class switches are not), time is summed over the classes.
    A fifth item, the tree of that model (its own branch lengths, mkforest.engine.branches),
    maps on that tree, with dwell times scaled to the given tree's total length so they
    stay fractions of the same whole.

    skip: one bool per fit; the maps that fall to a skipped fit keep its index in
    ``model`` but are not drawn (counts 0, dwell NaN, node states -1): a caller that
    would discard them (a rate the data do not bound, whose maps' changes grow with the
    optimiser's box) saves their cost, which grows with the rate. Each fit draws from its
    own stream (seeded from ``rng`` after the split of maps among fits), so the maps that
    are drawn are the same whether or not the others are.
    """
    fits = list(fits)
    w = np.array([float(f[2]) for f in fits])
    w = np.where(np.isfinite(w) & (w > 0), w, 0.0)
    if w.sum() <= 0:
        raise ValueError("mapping under a mixture needs at least one model with a positive weight")
    per_model = rng.multinomial(n_maps, w / w.sum())
    streams = rng.integers(0, 2**63, size=len(fits))
    skip = [False] * len(fits) if skip is None else [bool(x) for x in skip]
    k = np.asarray(tip_partials).shape[1]  # observed states (a hidden-class Q has more)
    parts = []
    for i, ((Q, root, _, *extra), n) in enumerate(zip(fits, per_model)):
        if n == 0:
            continue
        if skip[i]:
            parts.append(
                MapSet(
                    np.zeros((n, k, k), dtype=np.int64),
                    np.full((n, k), np.nan),
                    np.full((n, tree.n_nodes), -1, dtype=np.int64),
                    np.full(n, i, dtype=np.int64),
                )
            )
            continue
        own = np.random.default_rng(int(streams[i]))
        model = extra[0] if extra else None
        on = extra[1] if len(extra) > 1 and extra[1] is not None else tree
        if model is not None and model.n_classes > 1:
            ms = observed_maps(
                stochastic_maps(
                    on, model.expand_tips(tip_partials), Q, int(n), own, root, model.states
                ),
                model,
            )
        else:
            ms = stochastic_maps(on, tip_partials, Q, int(n), own, root, states)
        if on is not tree and on.total_length > 0:
            ms.dwell *= tree.total_length / on.total_length
        ms.model[:] = i
        parts.append(ms)
    return MapSet(
        np.concatenate([p.counts for p in parts]),
        np.concatenate([p.dwell for p in parts]),
        np.concatenate([p.node_states for p in parts]),
        np.concatenate([p.model for p in parts]),
    )


def observed_maps(ms: MapSet, model) -> MapSet:
    """Maps on a hidden-class model's combined states (class-major, k observed states x R
    classes) seen over the observed states: s@c -> s'@c counts as s -> s', a switch
    s@c -> s@d is not a change of state; time in s is the time in every s@c."""
    k, R = len(model.observed_states), model.n_classes
    n = ms.counts.shape[0]
    counts = ms.counts.reshape(n, R, k, R, k).sum(axis=(1, 3))
    counts[:, np.arange(k), np.arange(k)] = 0
    return MapSet(counts, model.collapse(ms.dwell), ms.node_states % k, ms.model)


def summarise(counts, dwell, states, quantiles=(0.025, 0.975)) -> dict:
    """Tidy rows summarising maps (pooled over maps and, if stacked, over trees).

    counts [n, k, k], dwell [n, k]. Returns {"transitions": [...], "dwell": [...]}:
    one row per from -> to direction (i != j) with mean, lower and upper quantile of
    the count; one row per state with mean, quantiles and mean fraction of the time.
    """
    counts = np.asarray(counts, dtype=np.float64)
    dwell = np.asarray(dwell, dtype=np.float64)
    lo, hi = quantiles
    k = len(states)
    rows = []
    for i in range(k):
        for j in range(k):
            if i == j:
                continue
            x = counts[:, i, j]
            rows.append(
                dict(
                    from_state=states[i],
                    to_state=states[j],
                    mean=float(x.mean()),
                    lower=float(np.quantile(x, lo)),
                    upper=float(np.quantile(x, hi)),
                )
            )
    total = dwell.sum(axis=1, keepdims=True)
    frac = np.divide(dwell, total, out=np.zeros_like(dwell), where=total > 0)
    drows = []
    for i in range(k):
        x = dwell[:, i]
        drows.append(
            dict(
                state=states[i],
                mean=float(x.mean()),
                lower=float(np.quantile(x, lo)),
                upper=float(np.quantile(x, hi)),
                mean_fraction=float(frac[:, i].mean()),
            )
        )
    return {"transitions": rows, "dwell": drows}
