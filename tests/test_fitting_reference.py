"""Fitting, model comparison and simulation against outside references.

Sources, beside each check:
- chi^2 critical values at 0.05: df 1 -> 3.841, df 2 -> 5.991, df 4 -> 9.488
  (handbook table: Abramowitz & Stegun 1964, Table 26.8; cross-checked with
  scipy.stats.chi2, general-purpose reference library)
- AIC = 2k - 2 ln L (Akaike 1974); AICc = AIC + 2k(k+1)/(n-k-1) (Hurvich & Tsai
  1989); BIC = k ln n - 2 ln L (Schwarz 1978); Akaike weights
  w_i = exp(-d_i/2) / sum_j exp(-d_j/2) (Burnham & Anderson 2002) -- published
  sources, checked against numbers worked by hand below
- maximum-likelihood rates against an independent optimisation of the reference
  pruning likelihood (tests/reference.py) with scipy.optimize
- simulation recovery and the maximum of ln L need no outside value
- simulated tip states against P(t) = scipy.linalg.expm(Q t) by a chi^2
  goodness-of-fit test (general-purpose reference library)
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.optimize
import scipy.stats
from conftest import partials_from_cells, random_newick, tip_data_mapping, yule_newick
from reference import (
    pruning_log_likelihood,
    q_from_rates,
    ref_tree_from_newick,
    reference_custom_q,
    transition_matrix,
)

from mkforest.data.trees import parse_newick
from mkforest.engine.compare import (
    akaike_weights,
    information_criteria,
    likelihood_ratio_test,
)
from mkforest.engine.fitting import fit_model
from mkforest.engine.likelihood import log_likelihood
from mkforest.engine.models import build_model
from mkforest.engine.simulate import simulate_states

# --------------------------------------------------------------------------- comparison


@pytest.mark.parametrize("df,critical", [(1, 3.841), (2, 5.991), (4, 9.488)])
def test_lrt_at_table_critical_value_gives_p_005(df, critical):
    """A statistic equal to the tabled 5% critical value gives p = 0.05 (Abramowitz &
    Stegun 1964, Table 26.8 -- handbook table). The table has 3 decimals, so p is
    0.05 to within the density times 5e-4 (< 1e-4)."""
    assert round(scipy.stats.chi2.ppf(0.95, df), 3) == critical  # scipy cross-check
    lnl_null = -123.4
    lnl_alt = lnl_null + critical / 2
    stat, got_df, p = likelihood_ratio_test(lnl_null, 3, lnl_alt, 3 + df)
    assert got_df == df
    assert abs(stat - critical) < 1e-9
    assert abs(p - 0.05) < 1e-4


def test_lrt_statistic_is_twice_the_log_likelihood_difference():
    """LR = 2 (ln L_alt - ln L_null), p = chi^2 upper tail (fact of the trade;
    scipy.stats.chi2, general-purpose reference library). Pagel (1994) pair test:
    4 extra rates, df = 4."""
    stat, df, p = likelihood_ratio_test(-50.0, 4, -44.0, 8)
    assert stat == pytest.approx(12.0, abs=1e-12) and df == 4
    # chi^2_4 upper tail at 12: exp(-6)(1 + 6) = 7 e^{-6} = 0.0173512652... (closed form
    # for even df: sf(x; 2m) = e^{-x/2} sum_{i<m} (x/2)^i / i!, handbook identity)
    assert p == pytest.approx(7 * math.exp(-6.0), rel=1e-10)


def test_information_criteria_hand_computed():
    """Formulas of Akaike (1974), Hurvich & Tsai (1989), Schwarz (1978); numbers by hand."""
    # ln L = -10, k = 2, n = 20:
    #   AIC  = 2*2 + 20 = 24
    #   AICc = 24 + 2*2*3/(20-2-1) = 24 + 12/17 = 24.7058823529...
    #   BIC  = 2 ln 20 + 20 = 2 * 2.9957322736 + 20 = 25.9914645471...
    ic = information_criteria(-10.0, 2, 20)
    assert ic["aic"] == pytest.approx(24.0, abs=1e-12)
    assert ic["aicc"] == pytest.approx(24.7058823529, abs=1e-9)
    assert ic["bic"] == pytest.approx(25.9914645471, abs=1e-9)
    # ln L = -53.2, k = 5, n = 40:
    #   AIC  = 10 + 106.4 = 116.4
    #   AICc = 116.4 + 2*5*6/34 = 116.4 + 1.7647058824 = 118.1647058824
    #   BIC  = 5 ln 40 + 106.4 = 5 * 3.6888794541 + 106.4 = 124.8443972706
    ic = information_criteria(-53.2, 5, 40)
    assert ic["aic"] == pytest.approx(116.4, abs=1e-12)
    assert ic["aicc"] == pytest.approx(118.1647058824, abs=1e-9)
    assert ic["bic"] == pytest.approx(124.8443972706, abs=1e-9)


def test_akaike_weights_hand_computed():
    """Burnham & Anderson (2002). Values 100, 102, 110 -> d = 0, 2, 10 ->
    exp(-d/2) = 1, e^-1 = 0.3678794412, e^-5 = 0.0067379470; sum 1.3746173882;
    weights 0.7274751568, 0.2676231541, 0.0049016890 (by hand; the first release's
    comment had 0.7274751574 and 0.2676231458, within assert_allclose's default rtol)."""
    w = akaike_weights([102.0, 100.0, 110.0])
    np.testing.assert_allclose(w, [0.2676231541, 0.7274751568, 0.0049016890], rtol=0, atol=1e-10)
    assert w.sum() == pytest.approx(1.0, abs=1e-12)
    # only differences matter
    np.testing.assert_allclose(akaike_weights([1102.0, 1100.0, 1110.0]), w, atol=1e-12)


# --------------------------------------------------------------------------- fits vs a reference optimiser


def reference_fit(tree, partials, states, transitions, labels, root, n_starts=3, seed=0):
    """Independent maximum of the reference pruning likelihood over log rates
    (Nelder-Mead then Powell from several starts; scipy.optimize)."""
    rng = np.random.default_rng(seed)

    def negative(x):
        Q = reference_custom_q(states, transitions, dict(zip(labels, np.exp(x))))
        ll = pruning_log_likelihood(tree, partials, Q, root, list(states))
        return -ll if np.isfinite(ll) else 1e300

    best = None
    for _ in range(n_starts):
        x0 = rng.normal(0.0, 1.0, size=len(labels))
        res = scipy.optimize.minimize(
            negative,
            x0,
            method="Nelder-Mead",
            options={"xatol": 1e-8, "fatol": 1e-11, "maxiter": 4000},
        )
        res = scipy.optimize.minimize(
            negative, res.x, method="Powell", options={"xtol": 1e-8, "ftol": 1e-12}
        )
        if best is None or res.fun < best.fun:
            best = res
    return -best.fun, np.exp(best.x)


FIT_CASES = [
    # (states, transitions, true rates by label, n_tips, root)
    (
        ("off", "on"),
        {"off -> on": "gain", "on -> off": "loss"},
        {"gain": 0.8, "loss": 1.6},
        40,
        "uniform",
    ),
    (("a", "b", "c"), {"a <-> b": "x", "b <-> c": "y"}, {"x": 1.0, "y": 0.5}, 40, "data_weighted"),
    (
        ("a", "b", "c"),
        {"a -> b": "up", "b -> c": "up", "b -> a": "down", "c -> b": 0.3},
        {"up": 1.2, "down": 0.6},
        40,
        "stationary",
    ),
]


@pytest.mark.parametrize("index", range(len(FIT_CASES)))
def test_fit_matches_independent_optimiser(index):
    """fit_model reaches the maximum that an independent optimiser finds on the
    reference likelihood (to 1e-6 in ln L), reports ln L equal to the reference
    ln L at its own rates (1e-9), and the rates agree to 1% (an interior maximum;
    a ln L gap of 1e-6 moves a rate by ~1e-3 relative at this curvature)."""
    states, transitions, truth, n_tips, root = FIT_CASES[index]
    rng = np.random.default_rng(500 + index)
    newick = random_newick(rng, n_tips, p_polytomy=0.1, p_zero=0.05, mean_length=0.3)
    ref_tree = ref_tree_from_newick(newick)
    model = build_model("custom", states, transitions, name=f"case{index}")
    Q_true = reference_custom_q(states, transitions, truth)
    cells = tip_data_mapping(rng, ref_tree, Q_true, list(states), p_missing=0.1, p_ambiguous=0.1)

    tree = parse_newick(newick)
    partials = partials_from_cells(cells, tree.tip_labels, list(states))
    fit = fit_model(tree, partials, model, root=root, n_starts=5, seed=1)

    ref_partials = partials_from_cells(cells, ref_tree.tip_labels, list(states))
    ref_max, ref_rates = reference_fit(
        ref_tree, ref_partials, states, transitions, list(model.labels), root
    )
    assert not fit.at_lower and not fit.at_upper, "case must have an interior maximum"
    assert fit.converged
    assert fit.log_likelihood >= ref_max - 1e-6, (fit.log_likelihood, ref_max)
    Q_fit = reference_custom_q(states, transitions, dict(zip(fit.labels, fit.rates)))
    at_fit = pruning_log_likelihood(ref_tree, ref_partials, Q_fit, root, list(states))
    assert abs(fit.log_likelihood - at_fit) <= 1e-9
    np.testing.assert_allclose(fit.rates, ref_rates, rtol=1e-2)


@pytest.mark.parametrize("k", [2, 3, 4])
def test_equal_rates_fit_is_a_maximum(k):
    """The fitted equal rate is a maximum: moving it by +-1% lowers ln L (no outside value)."""
    rng = np.random.default_rng(40 + k)
    states = [f"s{i}" for i in range(k)]
    newick = yule_newick(rng, 200, height=1.0)
    tree = parse_newick(newick)
    Q_true = q_from_rates(np.full((k, k), 1.5))
    cells = tip_data_mapping(rng, tree, Q_true, states, p_missing=0.05, p_ambiguous=0.05)
    partials = partials_from_cells(cells, tree.tip_labels, states)
    model = build_model("equal", states)
    fit = fit_model(tree, partials, model, n_starts=3, seed=0)
    rate = fit.rates[0]
    ll = log_likelihood(tree, partials, q_from_rates(np.full((k, k), rate)))
    assert abs(ll - fit.log_likelihood) <= 1e-9
    for factor in (0.99, 1.01):
        moved = log_likelihood(tree, partials, q_from_rates(np.full((k, k), rate * factor)))
        assert moved < ll, (factor, moved, ll)


# --------------------------------------------------------------------------- simulation recovery

# Tolerance: a factor of 1.5 (|ln(estimate/truth)| <= 0.405). On 4,000-tip Yule trees of
# height 1 with these rates, 20 pilot seeds gave a spread of ln(estimate/truth) of
# sd 0.08 (two states) and 0.08-0.10 (three states), so 1.5 is 4-5 standard deviations:
# a correct engine passes, a biased one (say a factor-2 error) cannot.
RECOVERY = [
    ("unconstrained", ("0", "1"), {"0->1": 1.0, "1->0": 2.0}),
    ("symmetric", ("a", "b", "c"), {"a<->b": 0.5, "a<->c": 1.0, "b<->c": 2.0}),
]


@pytest.mark.parametrize("seed", range(3))
@pytest.mark.parametrize("case", range(len(RECOVERY)))
def test_simulation_recovery(case, seed):
    kind, states, truth_by_transition = RECOVERY[case]
    model = build_model(kind, states)
    # truth by transition, read off the Q we build ourselves, not from the label spelling
    k = len(states)
    off = np.zeros((k, k))
    for key, rate in truth_by_transition.items():
        both = "<->" in key
        a, b = key.split("<->" if both else "->")
        off[states.index(a), states.index(b)] = rate
        if both:
            off[states.index(b), states.index(a)] = rate
    Q_true = q_from_rates(off)
    rng = np.random.default_rng(7000 + 10 * case + seed)
    tree = parse_newick(yule_newick(rng, 4000, height=1.0))
    node_states = simulate_states(tree, Q_true, rng)
    partials = np.zeros((tree.n_tips, k))
    partials[np.arange(tree.n_tips), node_states[: tree.n_tips]] = 1.0
    fit = fit_model(tree, partials, model, n_starts=3, seed=seed)
    Q_fit = model.q_matrix(fit.rates)
    mask = off > 0
    ratio = Q_fit[mask] / off[mask]
    assert np.all(np.abs(np.log(ratio)) <= math.log(1.5)), (ratio, fit.rates)
    ll_truth = log_likelihood(tree, partials, Q_true)
    assert fit.log_likelihood >= ll_truth - 1e-6, (fit.log_likelihood, ll_truth)


# --------------------------------------------------------------------------- simulator vs expm


def test_simulated_tips_follow_expm_rows():
    """On a star tree every tip is an independent draw from row P_{root}(t) of
    expm(Q t) (scipy.linalg.expm, general-purpose reference library); chi^2
    goodness of fit, with a fixed seed so the outcome is deterministic."""
    n, t = 4000, 0.7
    tree = parse_newick("[&R] (" + ",".join(f"x{i}:{t}" for i in range(n)) + ");")
    Q = q_from_rates([[0, 1.0, 0.2], [0.5, 0, 0.9], [0.1, 2.0, 0]])
    rng = np.random.default_rng(11)
    for root_state in range(3):
        tips = simulate_states(tree, Q, rng, root_state=root_state)[:n]
        counts = np.bincount(tips, minlength=3)
        expected = n * transition_matrix(Q, t)[root_state]
        assert scipy.stats.chisquare(counts, expected).pvalue > 1e-3, (counts, expected)


def test_simulated_root_follows_root_weights():
    """With root_weights w and no root_state, the root is drawn from w (chi^2 test)."""
    tree = parse_newick("(a:0.1,b:0.1);")
    Q = q_from_rates(np.full((3, 3), 1.0))
    w = np.array([0.6, 0.3, 0.1])
    rng = np.random.default_rng(12)
    roots = [simulate_states(tree, Q, rng, root_weights=w)[tree.root] for _ in range(3000)]
    counts = np.bincount(roots, minlength=3)
    assert scipy.stats.chisquare(counts, 3000 * w).pvalue > 1e-3, counts


def test_simulation_respects_zero_length_and_absorbing_states():
    """A zero-length branch copies its parent's state; an absorbing state is never
    left (P(0) = I, fact of the trade; forbidden transitions have probability 0)."""
    rng = np.random.default_rng(13)
    newick = random_newick(rng, 60, p_polytomy=0.2, p_zero=0.3)
    tree = parse_newick(newick)
    Q = q_from_rates([[0, 1.0, 0], [0, 0, 1.5], [0, 0, 0]])  # 0 -> 1 -> 2, 2 absorbing
    for _ in range(20):
        s = simulate_states(tree, Q, rng, root_state=0)
        for v in range(tree.n_nodes):
            p = tree.parent[v]
            if p < 0:
                continue
            if tree.length[v] == 0:
                assert s[v] == s[p]
            assert s[v] >= s[p]  # irreversible chain: never goes back


# --------------------------------------------------------------------------- rates at a bound


@pytest.mark.parametrize("seed", range(8))
def test_rate_whose_maximum_is_at_zero_is_flagged(seed):
    """If moving a fitted rate down to the lower bound of the search (1e-6 changes per
    tree height, fitting.LOWER / height) *raises* ln L (reference pruning, others held),
    the maximum lies at the bound: the fit must list that rate in ``at_lower`` so a
    reader does not take a near-zero estimate for a measured one (project rule:
    rates at a bound are said plainly). Also the fit must be a maximum to 1e-6.
    No outside value: a property of the maximum on a box."""
    from mkforest.engine.fitting import LOWER

    states = ["u", "v", "w"]
    Q = q_from_rates([[0, 1.0, 0.4], [0.7, 0, 1.2], [0.3, 0.9, 0]])
    rng = np.random.default_rng(seed)
    newick = random_newick(rng, 60, p_polytomy=0.1, p_zero=0.05, mean_length=0.3)
    ref_tree = ref_tree_from_newick(newick)
    cells = tip_data_mapping(rng, ref_tree, Q, states, p_missing=0.1, p_ambiguous=0.1)
    tree = parse_newick(newick)
    model = build_model("unconstrained", states)
    fit = fit_model(tree, partials_from_cells(cells, tree.tip_labels, states), model, seed=3)
    ref_partials = partials_from_cells(cells, ref_tree.tip_labels, states)
    problems = []
    for i, label in enumerate(model.labels):
        rates = fit.rates.copy()
        rates[i] = LOWER / tree.height
        Q_bound = model.q_matrix(
            rates
        )  # q_matrix is checked against the kind's definition elsewhere
        gain = (
            pruning_log_likelihood(ref_tree, ref_partials, Q_bound, "uniform", states)
            - fit.log_likelihood
        )
        if gain > 1e-6:
            problems.append(
                f"{label}: fit {fit.rates[i]:.3g} is not a maximum (ln L +{gain:.2e} at the bound)"
            )
        if gain > 1e-9 and label not in fit.at_lower:
            problems.append(
                f"{label}: fitted {fit.rates[i]:.3g}, ln L rises by {gain:.2e} at the "
                f"bound, but at_lower = {fit.at_lower}"
            )
    assert not problems, "\n".join(problems)


def test_weights_table_matches_per_tree_weights():
    """summarise.add_weights (all trees at once) against akaike_weights tree by tree
    (the hand-checked formula above): values from 100, 102, 110 shifted per tree, an
    impossible fit (criterion inf: weight 0), a fit not run (NaN: weight 0 beside finite
    ones), a tree where every fit is impossible (criterion_difference and weight left empty), and a
    model marked same_as another (left out)."""
    import pandas as pd

    from mkforest.engine.summarise import add_weights

    rows = []
    for tree in range(4):
        for model, value in zip(("a", "b", "c", "d"), (102.0, 100.0, 110.0, 101.0)):
            crit = value + 7 * tree
            if tree == 1 and model == "c":
                crit = np.inf
            if tree == 2 and model == "a":
                crit = np.nan
            if tree == 3:
                crit = np.inf
            rows.append(
                {
                    "tree_set": "s",
                    "analysis": "x",
                    "tree": tree,
                    "model": model,
                    "aicc": crit,
                    "same_as": "a" if model == "d" else "",
                }
            )
    out = add_weights(pd.DataFrame(rows), "aicc")
    for tree in range(3):
        g = out[(out.tree == tree) & (out.model != "d")]
        np.testing.assert_allclose(g["weight"], akaike_weights(g["aicc"]), rtol=0, atol=1e-15)
        finite = np.isfinite(g["aicc"])
        np.testing.assert_allclose(
            g["criterion_difference"][finite], g["aicc"][finite] - g["aicc"][finite].min()
        )
    assert out.loc[out.tree == 0, "weight"].iloc[:3].tolist() == pytest.approx(
        [0.2676231541, 0.7274751568, 0.0049016890], abs=1e-10
    )
    assert out.loc[out.model == "d", "weight"].isna().all()
    assert out.loc[out.tree == 3, ["criterion_difference", "weight"]].isna().all().all()
