"""Across-tree summaries of posteriors against closed forms worked by hand.

Sources: the weights are Bayes' rule with the tree sample as a prior of equal weights
(w_t = p(D|T_t) / sum_s p(D|T_s)); the effective number of trees 1 / sum w^2 is Kish's
effective sample size (Kish 1965, Survey Sampling; from memory); model probabilities
with equal prior probabilities are p(D|M) / sum p(D|M') (Kass & Raftery 1995, J. Am.
Stat. Assoc. 90:773); the weighted quantile is the inverse of the weighted
distribution function, as NumPy's 'inverted_cdf' method (a general-purpose reference
library, NumPy >= 2 takes weights). Each expected value below is worked from those
formulas with small numbers, not read from the code under test.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from mkforest.data.config import bayes_trees, spread_evenly
from mkforest.engine.posterior_pooling import (
    effective_trees,
    evidence_words,
    model_probabilities,
    pooled_quantiles,
    trait_weighted_quantiles,
    tree_weights,
    weighted_model_probabilities,
    weighted_quantiles,
)
from mkforest.jobs.bayes import parameter_flag, saved_per_chain, thin_draws


def test_tree_weights_are_marginal_likelihoods_normalised():
    # p(D|T) = 1, 3 and a tree without a value: weights 1/4, 3/4, 0
    w = tree_weights([math.log(1.0), math.log(3.0), float("nan")])
    assert w == pytest.approx([0.25, 0.75, 0.0], abs=1e-15)
    # the same with log values far below exp's range (log-sum-exp, no underflow)
    w = tree_weights([-2000.0, -2000.0 + math.log(3.0)])
    assert w == pytest.approx([0.25, 0.75], abs=1e-12)


def test_effective_number_of_trees():
    assert effective_trees([0.25, 0.75]) == pytest.approx(1 / (0.25**2 + 0.75**2))  # 1.6
    assert effective_trees(np.full(40, 1 / 40)) == pytest.approx(40.0)
    assert effective_trees([0.0, 1.0, 0.0]) == pytest.approx(1.0)


def test_model_probabilities_per_tree_and_across_trees():
    # one tree, p(D|M1) = 1, p(D|M2) = 4: 0.2 and 0.8
    assert model_probabilities([[0.0, math.log(4.0)]])[0] == pytest.approx([0.2, 0.8])
    # a model without a value on a tree: the others share the probability
    p = model_probabilities([[0.0, float("nan"), math.log(3.0)]])[0]
    assert p[0] == pytest.approx(0.25) and np.isnan(p[1]) and p[2] == pytest.approx(0.75)
    # two trees (prior 1/2 each): M1 has 1 and 3, M2 has 6 and 2 -> 4/12 and 8/12
    x = np.log([[1.0, 6.0], [3.0, 2.0]])
    assert weighted_model_probabilities(x) == pytest.approx([4 / 12, 8 / 12])
    # differs from the mean of per-tree probabilities (1/7 and 3/5 -> 0.371...)
    per_tree = model_probabilities(x)
    assert per_tree[:, 0].mean() == pytest.approx((1 / 7 + 3 / 5) / 2)


def test_weighted_quantiles_by_hand():
    # cumulative weights 0.1, 0.3, 0.6, 1.0: 2.5% -> 1, median -> 3, 97.5% -> 4
    q = weighted_quantiles([4.0, 1.0, 3.0, 2.0], [0.4, 0.1, 0.3, 0.2])
    assert list(q) == [1.0, 3.0, 4.0]
    # zero weight never counts
    assert list(weighted_quantiles([1.0, 100.0], [1.0, 0.0], (0.5, 0.99))) == [1.0, 1.0]


def test_weighted_quantiles_match_numpy_inverted_cdf():
    if tuple(int(x) for x in np.__version__.split(".")[:2]) < (2, 0):
        pytest.skip("NumPy < 2 has no weighted quantiles")
    rng = np.random.default_rng(3)
    for _ in range(20):
        v = rng.lognormal(size=57)
        w = rng.uniform(0.01, 1.0, size=57)
        qs = (0.025, 0.3, 0.5, 0.975)
        ref = np.quantile(v, qs, weights=w, method="inverted_cdf")
        assert weighted_quantiles(v, w, qs) == pytest.approx(ref, rel=0, abs=0)


def test_trait_weighted_summary_of_one_dominant_tree_is_that_trees_posterior():
    rng = np.random.default_rng(5)
    a, b = rng.lognormal(0, 1, 200), rng.lognormal(3, 1, 200)
    q = trait_weighted_quantiles([a, b], [0.0, -800.0])
    srt = np.sort(a)  # inverse CDF of 200 equal weights: the ceil(200 q)-th value
    assert list(q) == [srt[4], srt[99], srt[194]]
    # equal marginal likelihoods: every draw weighs the same as in the pooled sample
    q = trait_weighted_quantiles([a, b], [1.5, 1.5])
    srt = np.sort(np.concatenate([a, b]))
    assert list(q) == [srt[9], srt[199], srt[389]]


def test_pooled_quantiles_are_numpy_quantiles_of_the_pooled_draws():
    a, b = np.arange(1.0, 6.0), np.arange(10.0, 15.0)
    # pooled 1..5, 10..14: median halfway between 5 and 10
    assert pooled_quantiles([a, b])[1] == pytest.approx(7.5)


def test_kass_raftery_scale():
    # 2 ln B: 0-2 bare mention, 2-6 positive, 6-10 strong, above 10 very strong
    assert evidence_words(1.0).startswith("not worth")
    assert evidence_words(-1.0).startswith("not worth")
    assert evidence_words(2.5) == "positive"
    assert evidence_words(-7.0) == "strong, for the null"
    assert evidence_words(12.0) == "very strong"


def test_trees_spread_evenly_through_the_sample():
    assert spread_evenly(10, 4) == [0, 3, 6, 9]
    assert spread_evenly(5, 10) == [0, 1, 2, 3, 4]
    assert spread_evenly(7, None) == list(range(7))
    assert spread_evenly(9, 1) == [0]
    used = [{"tree_set": "s", "tree": str(10 + i), "chunk": str(i // 3)} for i in range(9)]
    used += [{"tree_set": "other", "tree": "1", "chunk": "9"}]
    assert bayes_trees(used, "s", 3) == [(10, 0), (14, 1), (18, 2)]


def test_flags_and_thinning():
    assert parameter_flag(1.005, 400, 400) == ""
    assert "r_hat" in parameter_flag(1.02, 1000, 1000)
    assert "ess_bulk" in parameter_flag(1.0, 399, 1000)
    assert "ess_tail" in parameter_flag(float("nan"), 1000, 10)  # NaN R-hat is flagged too
    assert saved_per_chain(200, 4, 500) == 50
    assert saved_per_chain(200, 4, 20) == 20
    x = np.arange(2 * 10).reshape(2, 10)
    assert thin_draws(x, 4).tolist() == [[0, 3, 6, 9], [10, 13, 16, 19]]
