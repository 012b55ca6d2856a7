"""Posteriors and marginal likelihoods combined across a sample of trees.

Two summaries of one model's posterior over a tree sample T_1..T_n:

* trees as given: the draws of every tree pooled with equal weight (the tree sample
  is the phylogenetic uncertainty; the trait does not inform it);
* trees weighted by the trait: tree t weighted by its marginal likelihood,
  w_t = p(D | T_t, M) / sum_s p(D | T_s, M), the posterior of the tree given the
  trait when the sample is the prior over trees (each tree 1/n). The effective
  number of trees is 1 / sum_t w_t^2 (Kish's effective sample size of weights).

Model probabilities (equal prior probabilities of the models) per tree are
p(M | D, T) = p(D | T, M) / sum_M' p(D | T, M'); over the tree sample they are
p(M | D) proportional to sum_t p(D | T_t, M) (Kass & Raftery 1995, J. Am. Stat. Assoc.
90:773, for Bayes factors). Everything is computed in logs (log-sum-exp).
Plain NumPy: the jobs at the end of a run import no SciPy.
"""

from __future__ import annotations

import numpy as np

QUANTILES = (0.025, 0.5, 0.975)


def _logsumexp(x: np.ndarray, axis=None) -> np.ndarray:
    m = np.max(x, axis=axis, keepdims=True)
    m = np.where(np.isfinite(m), m, 0.0)
    return np.squeeze(m, axis=axis) + np.log(np.sum(np.exp(x - m), axis=axis))


def tree_weights(log_ml) -> np.ndarray:
    """w_t = exp(log_ml_t) / sum_s exp(log_ml_s) over the trees with a finite value;
    a tree without one (not sampled, impossible) gets weight 0. All NaN: all NaN."""
    x = np.asarray(log_ml, float)
    ok = np.isfinite(x)
    w = np.zeros_like(x)
    if not ok.any():
        return np.full_like(x, np.nan)
    w[ok] = np.exp(x[ok] - _logsumexp(x[ok]))
    return w


def effective_trees(weights) -> float:
    """1 / sum w^2 of normalised weights: n for equal weights, 1 when one tree has them all."""
    w = np.asarray(weights, float)
    w = w[np.isfinite(w)]
    if not len(w) or w.sum() <= 0:
        return float("nan")
    w = w / w.sum()
    return float(1.0 / np.sum(w * w))


def model_probabilities(log_ml) -> np.ndarray:
    """[trees, models] log marginal likelihoods -> posterior model probabilities per tree
    (equal prior), among the models with a finite value on that tree (others NaN)."""
    x = np.atleast_2d(np.asarray(log_ml, float))
    out = np.full_like(x, np.nan)
    for t, row in enumerate(x):
        ok = np.isfinite(row)
        if ok.any():
            out[t, ok] = np.exp(row[ok] - _logsumexp(row[ok]))
    return out


def weighted_model_probabilities(log_ml) -> np.ndarray:
    """[trees, models] -> p(M | D) with the trees as a prior of equal weights:
    proportional to sum_t p(D | T_t, M), over the trees where every model has a value."""
    x = np.atleast_2d(np.asarray(log_ml, float))
    rows = np.all(np.isfinite(x), axis=1)
    if not rows.any():
        return np.full(x.shape[1], np.nan)
    per_model = _logsumexp(x[rows], axis=0)
    return np.exp(per_model - _logsumexp(per_model))


def weighted_quantiles(values, weights, qs=QUANTILES) -> np.ndarray:
    """Quantiles of a weighted sample by the inverse of its distribution function: the
    smallest value whose cumulative weight reaches q (NumPy's 'inverted_cdf' method,
    which NumPy >= 2 also offers with weights). Entries with weight 0 never count."""
    v = np.asarray(values, float)
    w = np.asarray(weights, float)
    keep = np.isfinite(v) & (w > 0)
    v, w = v[keep], w[keep]
    if not len(v):
        return np.full(len(qs), np.nan)
    order = np.argsort(v, kind="stable")
    v, cum = v[order], np.cumsum(w[order])
    cum /= cum[-1]
    # a tiny tolerance: cumulative sums of equal weights land on q up to rounding
    idx = np.searchsorted(cum, np.asarray(qs, float) - 1e-12, side="left")
    return v[np.minimum(idx, len(v) - 1)]


def pooled_quantiles(draws_per_tree, qs=QUANTILES) -> np.ndarray:
    """Quantiles of every tree's draws pooled with equal weight (each tree keeps the same
    number of draws), by NumPy's default (linear) rule: the median over the pooled draws."""
    pooled = np.concatenate([np.ravel(d) for d in draws_per_tree])
    pooled = pooled[np.isfinite(pooled)]
    if not len(pooled):
        return np.full(len(qs), np.nan)
    return np.quantile(pooled, qs)


def trait_weighted_quantiles(draws_per_tree, log_ml, qs=QUANTILES) -> np.ndarray:
    """Quantiles of the draws with tree t's draws sharing its weight w_t (tree_weights)."""
    w = tree_weights(log_ml)
    values, weights = [], []
    for d, wt in zip(draws_per_tree, w):
        d = np.ravel(np.asarray(d, float))
        values.append(d)
        weights.append(np.full(len(d), wt / max(len(d), 1)))
    if not values:
        return np.full(len(qs), np.nan)
    return weighted_quantiles(np.concatenate(values), np.concatenate(weights), qs)


# 2 ln B thresholds of Kass & Raftery (1995), section 3.2 (values from memory).
EVIDENCE_SCALE = ((2.0, "not worth more than a bare mention"), (6.0, "positive"), (10.0, "strong"))


def evidence_words(two_log_bf: float) -> str:
    """Kass & Raftery's words for 2 ln B of an alternative against its null; a negative
    value is read on the same scale and said to favour the null."""
    if not np.isfinite(two_log_bf):
        return ""
    size = abs(two_log_bf)
    words = next((w for top, w in EVIDENCE_SCALE if size < top), "very strong")
    if size < EVIDENCE_SCALE[0][0] or two_log_bf >= 0:
        return words
    return f"{words}, for the null"
