"""All-pairs scan: the likelihood-ratio test of dependence for every pair of traits on
one tree, with false-discovery control across the pairs.

For traits A and B the independent hypothesis (Pagel 1994) is the Kronecker sum of
the two traits' unconstrained chains, so its maximum ln L is the sum of the two
traits' separate maxima (uniform, stationary or data-weighted root;
mkforest.engine.pairs): each trait is fitted once per tree and every pair reuses
the two fits. The alternative (dependent, or one-sided dependence) is fitted on the
joint states with the independent optimum as its first start, so it ends at least
as high as its null. Statistic 2 (ln L_alt - ln L_ind) against chi-square with
df = n_params(alt) - n_params(ind); on each tree the pairs' p-values get
Benjamini-Hochberg adjusted values (Benjamini & Hochberg 1995, J. R. Stat. Soc. B
57:289) and a pair is a discovery on that tree when its adjusted value is at most
the level.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass

import numpy as np

from ..seeds import derive_seed
from .compare import likelihood_ratio_test
from .fitting import LOWER, MAX_STARTS, MIN_STARTS, UPPER, FitResult, fit_model
from .hidden import with_hidden_classes
from .models import RateModel, build_model
from .pairs import TraitPair, hypothesis_model, make_pair, nesting

NULL = "independent"
# an alternative whose optimum is below its null's by more than this missed its maximum
LOSS_TOL = 0.01


def pair_name(first: str, second: str) -> str:
    """The pair's name in seeds and messages (never a file name)."""
    return f"{first}~{second}"


def scan_pairs(traits: list, max_joint: int) -> list:
    """(first, second) Traits of every pair of ``traits`` (in their order) whose joint
    chain has at most ``max_joint`` states."""
    return [(a, b) for a, b in itertools.combinations(traits, 2) if a.k * b.k <= max_joint]


def single_model(trait) -> RateModel:
    """The trait's unconstrained chain: its half of the independent hypothesis."""
    return build_model("unconstrained", tuple(trait.states), None, "unconstrained")


def independent_q(q1: np.ndarray, q2: np.ndarray) -> np.ndarray:
    """Joint rate matrix of two independent chains (first trait varying slowest):
    the Kronecker sum Q1 (+) Q2 = Q1 x I + I x Q2; a change of both at once has rate 0."""
    return np.kron(q1, np.eye(len(q2))) + np.kron(np.eye(len(q1)), q2)


def rates_from_q(model: RateModel, q: np.ndarray) -> np.ndarray:
    """The model's free rates read off a rate matrix of a model nested in it: parameter
    p takes the rate of the first transition it governs (nesting makes them equal)."""
    out = np.empty(model.n_params)
    for p in range(model.n_params):
        i, j = np.argwhere(model.rate_index == p)[0]
        out[p] = q[i, j]
    return out


@dataclass(frozen=True)
class SingleFit:
    """What a pair needs of one trait's unconstrained fit on one tree."""

    log_likelihood: float
    q_matrix: np.ndarray
    converged: bool
    at_upper: tuple = ()  # labels of rates the data do not bound from above


def single_from_result(res: FitResult) -> SingleFit:
    return SingleFit(res.log_likelihood, res.q_matrix, bool(res.converged), res.unbounded)


def fit_single(
    tree,
    trait,
    root: str = "uniform",
    seed: int = 0,
    absent: str = "error",
    n_starts: int = MIN_STARTS,
    lower: float = LOWER,
    upper: float = UPPER,
    max_starts: int = MAX_STARTS,
) -> FitResult:
    """One trait's unconstrained fit on one tree (seeded by tree, trait; never by pair)."""
    return fit_model(
        tree,
        trait.tip_partials(tree, absent=absent),
        single_model(trait),
        root,
        n_starts=n_starts,
        seed=derive_seed(seed, tree.index, "scan", trait.name),
        lower=lower,
        upper=upper,
        max_starts=max_starts,
    )


def pair_hypotheses(pair: TraitPair, alternatives, hidden_classes=1, class_switch="equal"):
    """(independent RateModel, {alternative: (RateModel, df)}) on the pair's joint states."""

    def model(h):
        return with_hidden_classes(hypothesis_model(pair, h), hidden_classes, class_switch, h)

    null = model(NULL)
    alts = {}
    for h in alternatives:
        alt = model(h)
        nest = nesting(null, alt)
        if nest is None:  # built-in hypotheses always nest; a guard for new ones
            raise ValueError(f"'{NULL}' is not nested in '{h}'")
        alts[h] = (alt, nest.df)
    return null, alts


def test_pair(
    tree,
    first,
    second,
    singles: tuple | None,
    alternatives=("dependent",),
    root: str = "uniform",
    seed: int = 0,
    absent: str = "error",
    hidden_classes: int = 1,
    class_switch: str = "equal",
    n_starts: int = MIN_STARTS,
    lower: float = LOWER,
    upper: float = UPPER,
    max_starts: int = MAX_STARTS,
    max_joint: int = 16,
) -> list:
    """One dict per alternative: the likelihood-ratio test of independence of two traits
    on one tree. ``singles``: the two traits' SingleFit on this tree (None with hidden
    classes, where the independent hypothesis does not split and is fitted jointly)."""
    name = pair_name(first.name, second.name)
    pair = make_pair(name, first, second, max_joint)
    null, alts = pair_hypotheses(pair, alternatives, hidden_classes, class_switch)
    X = pair.joint_trait().tip_partials(tree, absent=absent)
    n_taxa = int((X.sum(axis=1) < X.shape[1]).sum())
    fit = dict(n_starts=n_starts, lower=lower, upper=upper, max_starts=max_starts)
    if singles is None or hidden_classes > 1:
        res = fit_model(
            tree, X, null, root, seed=derive_seed(seed, tree.index, "scan", name, NULL), **fit
        )
        ll_null, q_null, null_ok = res.log_likelihood, res.q_matrix, res.converged
        null_unbounded = res.unbounded
    else:
        s1, s2 = singles
        ll_null = s1.log_likelihood + s2.log_likelihood
        q_null = independent_q(s1.q_matrix, s2.q_matrix)
        null_ok = s1.converged and s2.converged
        null_unbounded = tuple(f"{first.name}: {x}" for x in s1.at_upper) + tuple(
            f"{second.name}: {x}" for x in s2.at_upper
        )
    rows = []
    for h, (alt, df) in alts.items():
        notes = []
        start = () if not np.all(np.isfinite(q_null)) else (rates_from_q(alt, q_null),)
        res = fit_model(
            tree,
            X,
            alt,
            root,
            seed=derive_seed(seed, tree.index, "scan", name, h),
            first_starts=start,
            **fit,
        )
        ll_alt = res.log_likelihood
        if np.isfinite(ll_null) and np.isfinite(ll_alt):
            if ll_alt < ll_null - LOSS_TOL:
                notes.append(
                    f"the {h} fit is {ll_null - ll_alt:.3g} log-units below the independent "
                    "one: its optimiser missed the maximum; statistic set to 0"
                )
            stat, _, p = likelihood_ratio_test(ll_null, null.n_params, ll_alt, alt.n_params)
        else:
            stat = p = float("nan")
            notes.append("not tested: the data are impossible under a hypothesis (ln L = -inf)")
        if not (null_ok and res.converged):
            which = [x for x, ok in ((NULL, null_ok), (h, res.converged)) if not ok]
            notes.append(f"fit of {' and '.join(which)} not converged")
        unbounded = tuple(null_unbounded) + tuple(res.unbounded)
        if unbounded:
            notes.append(f"rates at or open to the upper bound: {', '.join(unbounded)}")
        rows.append(
            {
                "tree_set": tree.tree_set,
                "tree": int(tree.index),
                "trait_1": first.name,
                "trait_2": second.name,
                "null": NULL,
                "alternative": h,
                "n_taxa": n_taxa,
                "log_likelihood_null": ll_null,
                "log_likelihood_alternative": ll_alt,
                "statistic": stat,
                "df": df,
                "p_value": p,
                "converged": bool(null_ok and res.converged),
                "n_at_upper": len(unbounded),
                "note": "; ".join(notes),
            }
        )
    return rows
