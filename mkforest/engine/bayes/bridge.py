"""The log marginal likelihood from posterior draws by bridge sampling.

Meng & Wong (1996, Statistica Sinica 6:831), iterative optimal bridge, as set out in
the tutorial of Gronau et al. (2017, J. Math. Psychol. 81:80): the proposal g is a
normal distribution with the mean and covariance of the first half of every chain's
draws (in the sampler's unconstrained coordinates); the second halves (N1 draws) and
N2 = N1 draws from g give l1 = ln q - ln g at the posterior draws and l2 at the
proposal draws (q: the unnormalised posterior density, the prior's constants
included), and the marginal likelihood r is the fixed point of

    r = mean_j[e^l2_j / (s1 e^l2_j + s2 r)] / mean_i[1 / (s1 e^l1_i + s2 r)],
    s1 = N1 / (N1 + N2), s2 = N2 / (N1 + N2).

Its Monte Carlo error is the approximate relative mean-squared error of
Frühwirth-Schnatter (2004, Econometrics J. 7:143; Gronau et al. 2017, eq. 17), with
the posterior draws' autocorrelation taken in through their effective sample size
(ArviZ, ``method="mean"``): the standard error of ln r to first order.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.special import logsumexp


def _log_mean_exp(a):
    return float(logsumexp(a) - math.log(len(a)))


def bridge_log_marginal(log_q, z, log_q_draws, rng, tol=1e-10, max_iter=1000):
    """(ln marginal likelihood, Monte Carlo error) from draws z [chains, draws, n] of the
    density q (``log_q``: z [n] -> ln q; ``log_q_draws`` [chains, draws]: ln q at z)."""
    import arviz as az

    chains, draws, n = z.shape
    half = draws // 2
    fit = z[:, :half].reshape(-1, n)
    post = z[:, half:]
    l_post = log_q_draws[:, half:]
    mean = fit.mean(axis=0)
    cov = np.atleast_2d(np.cov(fit, rowvar=False))
    cov += np.eye(n) * 1e-12 * max(1.0, float(np.trace(cov)))
    chol = np.linalg.cholesky(cov)
    log_det = 2.0 * float(np.sum(np.log(np.diag(chol))))

    def log_g(x):
        u = np.linalg.solve(chol, (x - mean).T).T
        return -0.5 * np.sum(u * u, axis=-1) - 0.5 * (n * math.log(2 * math.pi) + log_det)

    n1 = post.shape[0] * post.shape[1]
    n2 = n1
    proposals = mean + rng.standard_normal((n2, n)) @ chol.T
    l1 = l_post.reshape(-1) - log_g(post.reshape(-1, n))
    l2 = np.array([log_q(x) for x in proposals]) - log_g(proposals)
    ls1, ls2 = math.log(n1 / (n1 + n2)), math.log(n2 / (n1 + n2))
    finite2 = np.where(np.isfinite(l2), l2, -np.inf)
    log_r = float(np.median(l1))
    for _ in range(max_iter):
        num = finite2 - np.logaddexp(ls1 + finite2, ls2 + log_r)
        den = -np.logaddexp(ls1 + l1, ls2 + log_r)
        new = _log_mean_exp(num) - _log_mean_exp(den)
        if abs(new - log_r) < tol:
            log_r = new
            break
        log_r = new
    # relative mean-squared error (Fruhwirth-Schnatter 2004): f1 at the proposal draws,
    # f2 at the posterior draws, both in units of the estimate
    f1 = np.exp(finite2 - log_r - np.logaddexp(ls1 + finite2 - log_r, ls2))
    f2 = np.exp(-np.logaddexp(ls1 + l1 - log_r, ls2))
    f2_chains = az.convert_to_dataset({"f2": f2.reshape(post.shape[0], post.shape[1])})
    ess = float(az.ess(f2_chains, method="mean")["f2"])
    ess = min(max(ess, 1.0), n1)
    re2 = f1.var() / (n2 * f1.mean() ** 2) + f2.var() / (ess * f2.mean() ** 2)
    return log_r, math.sqrt(re2)
