"""Rates at the upper bound: the data cannot bound them, so no table or sentence may
present them as estimates.

Reproduced first on data that drive a rate to the bound: a trait whose states
alternate between sister tips. Under the equal-rates Mk model with k states,
P_ij(t) -> 1/k for every i, j as the rate grows (closed form: Jukes & Cantor 1969,
Lewis 2001), so the likelihood of n scored tips under a uniform root rises towards
(1/k)^n and the fit runs to the upper bound; the check compares ln L there with
n ln(1/k).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
from conftest import yule_newick
from scipy.stats import chi2

from mkforest.data.traits import trait_from_mapping
from mkforest.data.trees import parse_newick
from mkforest.engine.fitting import UPPER
from mkforest.engine.models import build_model
from mkforest.engine.summarise import BOUND_SHARE, averaged_rates, rate_summary
from mkforest.jobs.ancestral import transition_tables
from mkforest.jobs.fit import fit_chunk
from mkforest.report.methods import rate_words

STATES = ("small", "medium", "large")


def alternating_case(seed=0, n_tips=40):
    rng = np.random.default_rng(seed)
    tree = parse_newick(yule_newick(rng, n_tips, height=1.0))
    # consecutive tips in the tree's own order are mostly sisters: their states differ
    trait = trait_from_mapping("size", {t: STATES[i % 3] for i, t in enumerate(tree.tip_labels)})
    return tree, trait


def test_alternating_states_drive_the_equal_rate_to_the_upper_bound():
    tree, trait = alternating_case()
    model = build_model("equal", trait.states, None, "one_rate")
    fits, rates = fit_chunk([tree], trait, model, "uniform", "size", seed=3, starts=3)
    (fit,) = fits
    assert fit["at_upper"] == "rate"
    # closed form at saturation: every tip has probability 1/k whatever the others
    assert abs(fit["log_likelihood"] - tree.n_tips * math.log(1 / 3)) < 1e-6
    rates = pd.DataFrame(rates)
    assert (rates["at_bound"] == "upper").all()
    np.testing.assert_allclose(rates["rate"], UPPER / tree.height, rtol=1e-9)
    summary = rate_summary(
        rates, averaged_rates(pd.DataFrame(fits).assign(weight=1.0), rates)
    ).set_index(["model", "from_state", "to_state"])
    row = summary.loc[("one_rate", "small", "medium")]
    # the bound is not an estimate: no median, no interval; the limit is given instead
    assert row["status"] == "unbounded" and row["n_at_upper"] == 1 and row["n_estimated"] == 0
    assert np.isnan(row["median_rate"]) and np.isnan(row["rate_low95"])
    assert row["at_upper_min"] == rates["rate"].min()
    avg = summary.loc[("averaged", "small", "medium")]
    assert avg["status"] == "unbounded" and np.isnan(avg["median_rate"])


def test_rates_that_only_have_a_ratio_are_flagged_with_the_bound():
    """Two states alternating between sisters, a separate rate each way: ln L rises
    towards its limit as both rates grow together, where the tips become independent
    draws from the stationary distribution pi = (b, a) / (a + b); the supremum is
    n0 ln(n0 / n) + n1 ln(n1 / n) at pi0 = n0 / n (two-state closed form, e.g. Harmon
    2019 ch. 7, from memory). The optimiser stops anywhere on that plateau; both rates
    must be reported as bound-limited, not as estimates."""
    rng = np.random.default_rng(0)
    tree = parse_newick(yule_newick(rng, 24, height=1.0))
    trait = trait_from_mapping(
        "glow", {t: ("dull", "glowing")[i % 2] for i, t in enumerate(tree.tip_labels)}
    )
    model = build_model("unconstrained", trait.states, None, "free")
    fits, rates = fit_chunk([tree], trait, model, "uniform", "glow", seed=1, starts=2)
    n0 = sum(i % 2 == 0 for i in range(tree.n_tips))
    n1 = tree.n_tips - n0
    sup = n0 * math.log(n0 / tree.n_tips) + n1 * math.log(n1 / tree.n_tips)
    assert abs(fits[0]["log_likelihood"] - sup) < 1e-6
    assert set(fits[0]["at_upper"].split(",")) == {"dull->glowing", "glowing->dull"}
    assert all(r["at_bound"] == "upper" for r in rates)
    # data with a real signal: rates inside the bounds stay estimates
    clustered = trait_from_mapping(
        "glow", {t: ("dull", "glowing")[i < 12] for i, t in enumerate(tree.tip_labels)}
    )
    fits, rates = fit_chunk([tree], clustered, model, "uniform", "glow", seed=1, starts=2)
    assert fits[0]["at_upper"] == "" and all(r["at_bound"] != "upper" for r in rates)


def test_estimates_whose_interval_reaches_the_bound_are_not_reported_as_bounded():
    """Three states assigned in turn along the tips: the unconstrained model finds an
    interior maximum, but with its rates scaled up together to the bound ln L falls by
    less than chi2(0.95, 1 df) / 2 (scipy.stats.chi2, general-purpose library): their 95%
    likelihood interval reaches the bound, so they are listed in open_upper."""
    tree, trait = alternating_case(seed=0)
    model = build_model("unconstrained", trait.states, None, "free")
    fits, rates = fit_chunk([tree], trait, model, "uniform", "size", seed=3, starts=3)
    (fit,) = fits
    assert fit["at_upper"] == "" and fit["open_upper"] != ""
    from mkforest.engine.fitting import LogLikelihood

    f = LogLikelihood(tree, trait.tip_partials(tree), model)
    r = pd.DataFrame(rates)
    opened = set(fit["open_upper"].split(","))
    assert set(r.loc[r["at_bound"] == "open", "parameter"]) == opened
    x = np.array([r.loc[r["parameter"] == lab, "rate"].iloc[0] for lab in model.labels])
    moved = np.array([lab in opened for lab in model.labels])
    scaled = x.copy()
    scaled[moved] *= (UPPER / tree.height) / x[moved].max()
    assert f(scaled) > fit["log_likelihood"] - chi2.isf(0.05, 1) / 2
    assert fit["log_likelihood"] >= f(scaled) - 1e-9  # the estimate is interior
    summary = rate_summary(r, averaged_rates(pd.DataFrame(fits).assign(weight=1.0), r))
    row = summary[
        (summary["model"] == "free")
        & summary.apply(lambda q: f"{q['from_state']}->{q['to_state']}" in opened, axis=1)
    ].iloc[0]
    assert row["status"] == "unbounded" and row["n_at_upper"] == 0 and np.isnan(row["median_rate"])


def _rates(values, bounds, model="free", a="x", b="y"):
    return pd.DataFrame(
        {
            "analysis": "t",
            "model": model,
            "tree": range(len(values)),
            "from_state": a,
            "to_state": b,
            "rate": values,
            "parameter": "q",
            "at_bound": bounds,
        }
    )


def test_rate_summary_keeps_bound_limited_trees_out_of_the_interval():
    values = [0.5, 0.7, 0.9, 1.1, 0.000001, 9000.0, 8000.0, 600.0]
    bounds = ["", "", "", "", "lower", "upper", "upper", "open"]
    rates = _rates(values, bounds)
    row = rate_summary(
        rates, averaged_rates(pd.DataFrame(columns=["analysis", "model", "tree", "weight"]), rates)
    ).iloc[0]
    estimated = np.array(values[:5])
    assert row["n_trees"] == 8 and row["n_estimated"] == 5 and row["n_unbounded"] == 3
    assert row["n_at_upper"] == 2
    assert row["n_at_lower"] == 1 and row["status"] == "partly_unbounded"
    assert row["median_rate"] == np.median(estimated) == 0.7
    assert row["rate_high95"] == np.quantile(estimated, 0.975) < 1.2
    assert row["at_upper_min"] == 8000.0
    plain = rate_summary(_rates([0.5, 0.7], ["", ""]), _rates([], []).assign(model="averaged"))
    assert plain.iloc[0]["status"] == "estimated" and plain.iloc[0]["n_at_upper"] == 0


def test_averaged_rate_is_flagged_when_the_bound_shapes_it():
    # tree 0: the bound-limited model carries 20% of the weight; tree 1: 1e-12 (its
    # part, 1e-12 x 9000, is far below BOUND_SHARE of the average); tree 2: 1e-4, whose
    # part 0.9 is most of the average
    fits = pd.DataFrame(
        {
            "analysis": "t",
            "model": ["free", "one"] * 3,
            "tree": [0, 0, 1, 1, 2, 2],
            "weight": [0.2, 0.8, 1e-12, 1 - 1e-12, 1e-4, 1 - 1e-4],
        }
    )
    rates = pd.concat(
        [
            _rates([9000.0, 9000.0, 9000.0], ["upper"] * 3, "free"),
            _rates([0.4, 0.4, 0.4], [""] * 3, "one"),
        ],
        ignore_index=True,
    )
    avg = averaged_rates(fits, rates).set_index("tree")
    np.testing.assert_allclose(
        avg["rate"],
        [0.2 * 9000 + 0.8 * 0.4, 1e-12 * 9000 + (1 - 1e-12) * 0.4, 1e-4 * 9000 + (1 - 1e-4) * 0.4],
    )
    np.testing.assert_allclose(avg["weight_unbounded"], [0.2, 1e-12, 1e-4])
    assert avg["unbounded"].tolist() == [True, False, True]
    assert 1e-12 * 9000 < BOUND_SHARE * avg.loc[1, "rate"]
    row = rate_summary(rates, averaged_rates(fits, rates)).set_index("model").loc["averaged"]
    assert row["n_estimated"] == 1 and row["n_unbounded"] == 2
    assert row["median_rate"] == avg.loc[1, "rate"]


def _chunk(model_at_upper, map_model, counts):
    T, M = map_model.shape
    return dict(
        tree=np.arange(T),
        counts=counts,
        dwell=np.full((T, M, 2), 1.0),
        map_model=map_model,
        model_at_upper=model_at_upper,
        weights=np.ones((T, 2)),
        unconverged_weight=np.zeros(T),
        bound_weight=model_at_upper.any(axis=1).astype(float),
        skipped=np.zeros(T, dtype=bool),
        states=["off", "on"],
        models=["one", "free"],
        clades=[],
        choice="average",
        choice_note="",
    )


def test_maps_under_a_bound_limited_fit_are_left_out_and_counted():
    T, M = 3, 4
    map_model = np.array([[0, 0, 1, 1], [0, 0, 0, 0], [1, 1, 1, 1]], dtype=np.int16)
    model_at_upper = np.array([[False, True], [False, True], [False, True]])
    counts = np.zeros((T, M, 2, 2), dtype=np.int32)
    counts[..., 0, 1] = np.where(map_model == 1, 1848, 2)  # bound-limited maps count 1,848
    trans, times, per_tree = transition_tables("size", _chunk(model_at_upper, map_model, counts), 3)
    row = trans[(trans["from_state"] == "off")].iloc[0]
    assert row["n_maps"] == 6 and row["n_maps_at_upper"] == 6
    assert row["mean_count"] == 2.0 and row["count_high95"] == 2.0
    assert "6 of 12 maps (on 2 of 3 trees)" in row["caution"]
    pt = per_tree[per_tree["from_state"] == "off"].set_index("tree")
    assert pt["n_maps"].tolist() == [2, 4, 0] and pt["mean_count"].iloc[:2].tolist() == [2.0, 2.0]
    assert np.isnan(pt.loc[2, "mean_count"])
    assert (times["n_maps"] == 6).all()
    # every map bound-limited: no numbers at all, and the caution says why
    trans, _, _ = transition_tables(
        "size", _chunk(model_at_upper, np.ones((T, M), np.int16), counts), 3
    )
    assert trans["mean_count"].isna().all() and (trans["n_maps"] == 0).all()
    assert "every map (12)" in trans["caution"].iloc[0]


def test_methods_words_never_give_the_bound_as_a_rate():
    est = dict(
        from_state="a",
        to_state="b",
        n_trees=5,
        n_estimated=5,
        n_unbounded=0,
        n_at_upper=0,
        median_rate=0.5,
        rate_low95=0.25,
        rate_high95=0.75,
        at_upper_min=np.nan,
    )
    assert rate_words(est) == "a→b 0.50 (0.25 to 0.75)"
    part = {**est, "n_estimated": 2, "n_unbounded": 3, "n_at_upper": 2, "at_upper_min": 8256.0}
    assert rate_words(part) == (
        "a→b 0.50 (0.25 to 0.75) over the 2 trees where the data bound "
        "it; not bounded above on 3, at the upper bound (≥ 8256.00) on 2"
    )
    every = {
        **est,
        "n_estimated": 0,
        "n_unbounded": 5,
        "n_at_upper": 5,
        "median_rate": np.nan,
        "rate_low95": np.nan,
        "rate_high95": np.nan,
        "at_upper_min": 8256.0,
    }
    assert rate_words(every) == (
        "a→b not bounded above by the data on any tree, at the upper "
        "bound (≥ 8256.00) on 5; not estimable from these data"
    )
    open_only = {**every, "n_at_upper": 0, "at_upper_min": np.nan}
    assert "≥" not in rate_words(open_only) and "not estimable" in rate_words(open_only)


def test_a_fit_with_an_estimated_treatment_flags_rates_the_data_do_not_bound():
    """The alternating trait under each estimated treatment: the likelihood still rises
    towards saturation, n ln(1/k) (closed form above), so the equal rate is at the upper
    bound or its 95% interval reaches it (branch value held at its estimate)."""
    from mkforest.engine.branches import ESTIMABLE, Treatment
    from mkforest.engine.fitting import fit_model

    tree, trait = alternating_case()
    model = build_model("equal", trait.states, None, "one_rate")
    X = trait.tip_partials(tree)
    for name in ESTIMABLE:
        fit = fit_model(tree, X, model, n_starts=3, seed=3, branches=Treatment(name))
        assert fit.unbounded == ("rate",), name
        assert fit.log_likelihood <= tree.n_tips * math.log(1 / 3) + 1e-6, name
