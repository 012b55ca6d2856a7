"""Model comparison: information criteria, Akaike weights, likelihood-ratio tests.

AIC = 2k - 2 ln L (Akaike 1974); AICc = AIC + 2k(k+1)/(n-k-1) (Hurvich & Tsai
1989); BIC = k ln n - 2 ln L (Schwarz 1978); Akaike weights
w_i = exp(-d_i/2) / sum_j exp(-d_j/2) with d_i the difference to the best
(Burnham & Anderson 2002). n is the number of taxa with data (common practice).
"""

from __future__ import annotations

import math

import numpy as np

CRITERIA = ("aic", "aicc", "bic")


def information_criteria(log_likelihood: float, n_params: int, n: int) -> dict:
    """AIC, AICc and BIC. AICc is +inf when n <= k + 1 (too few taxa for the model)."""
    k = n_params
    aic = 2 * k - 2 * log_likelihood
    aicc = aic + 2 * k * (k + 1) / (n - k - 1) if n - k - 1 > 0 else math.inf
    bic = k * math.log(n) - 2 * log_likelihood if n > 0 else math.nan
    return {"aic": aic, "aicc": aicc, "bic": bic}


# rates.tsv ``at_bound`` of every rate of a fit with ln L = -inf: the data cannot arise under
# the model on that tree, so the fit has no estimate (rate empty) and, like its infinite
# criterion (weight 0), it is left out of every summary and counted
IMPOSSIBLE = "impossible"


def akaike_weights(values) -> np.ndarray:
    """Weights from criterion values (smaller is better); infinite values get weight 0."""
    v = np.asarray(values, dtype=np.float64)
    finite = np.isfinite(v)
    w = np.zeros_like(v)
    if not finite.any():
        return np.full_like(v, np.nan)
    d = v[finite] - v[finite].min()
    e = np.exp(-0.5 * d)
    w[finite] = e / e.sum()
    return w


def likelihood_ratio_test(lnl_null: float, k_null: int, lnl_alt: float, k_alt: int):
    """(statistic, df, p) with statistic = 2 (ln L_alt - ln L_null) against chi^2 with
    df = k_alt - k_null. The statistic is floored at 0: a nested alternative can
    only do as well as its null, so a small negative value is optimiser noise."""
    df = k_alt - k_null
    if df <= 0:
        raise ValueError(f"the alternative must have more parameters than the null (df = {df})")
    stat = max(0.0, 2.0 * (lnl_alt - lnl_null))
    # chi-square survival function (scipy.special: lighter than scipy.stats), imported here:
    # the figure and table jobs that import this module for the weights need no SciPy
    from scipy.special import chdtrc

    return stat, df, float(chdtrc(df, stat))


def model_weights(criteria, choice: str, names) -> np.ndarray:
    """Weights of the models on one tree: Akaike weights ('average'), all on the best
    ('best'), or all on one named model. Models without a finite criterion get 0."""
    v = np.asarray(criteria, dtype=float)
    w = np.zeros(len(v))
    if not np.isfinite(v).any():
        return w
    if choice == "average":
        return akaike_weights(v)
    if choice == "best":
        w[int(np.nanargmin(np.where(np.isfinite(v), v, np.nan)))] = 1.0
        return w
    i = list(names).index(choice)
    if np.isfinite(v[i]):
        w[i] = 1.0
    return w
