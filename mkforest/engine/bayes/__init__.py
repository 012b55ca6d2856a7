"""Bayesian estimation of one model on one tree: posterior draws of the rates (and of
an estimated branch-length parameter), their diagnostics, and the log marginal
likelihood.

- Prior (``Prior``): the same independent prior for every free rate (hidden-class
  switching rates included) on s = rate * H, H the tree's root-to-tip height (the
  unit of the fit's rate bounds, ``engine.search``): exponential (default mean 1),
  gamma or log-uniform. An estimated branch-length parameter: uniform on the
  optimiser's range of its value x (``treatments.BOUNDS``; for delta that is
  uniform on ln delta, for early_burst on a * H).
- Density (``density.LogPosterior``): ln L + ln prior on log-rates (and a logit of x),
  Jacobians included, exact gradient from ``gradient.Evaluator``.
- Sampler (``sampler.run_chains``): the No-U-Turn sampler (Hoffman & Gelman 2014)
  of nutpie: step size by dual averaging to acceptance 0.8, a diagonal mass matrix
  adapted from draws and gradients during warm-up; defaults 4 chains, 500 warm-up
  and 500 kept draws per chain, chains started at seeded points around one change
  along H. Chosen over mici by effective samples per CPU second
  (benchmarks/bench_bayes.py).
- Diagnostics: bulk and tail ESS and rank-normalised R-hat per parameter from ArviZ
  (Vehtari, Gelman, Simpson, Carpenter & Bürkner 2021); ``flagged`` when any R-hat
  exceeds 1.01 or any ESS is below 400 (their recommended thresholds).
- Marginal likelihood (``bridge``): bridge sampling (Meng & Wong 1996; Gronau et al.
  2017) from the kept draws, with its Monte Carlo error (Frühwirth-Schnatter 2004).
- Hidden rate classes: the likelihood and the prior are the same under any
  renumbering of the classes, so the posterior has R! copies of each mode. Every
  draw is renumbered slowest class first (``hidden.relabel_classes``, as ML fits
  are); the marginal likelihood is bridged on that ordered region (the proposal's
  draws outside it count as density 0) and ln R! added back.
- Imports: this package's top and ``prior`` load no compiled kernel, SciPy or
  sampler (the config check can parse a prior); ``sample_posterior`` loads them.
- Seeds: everything random derives from ``seed`` (starts, the sampler, the bridge's
  proposal), so a result depends only on (tree, data, model, prior, settings, seed).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..hidden import relabel_classes
from ..treatments import Treatment
from .prior import PRIOR_KINDS, Prior

__all__ = [
    "ESS_MIN",
    "PRIOR_KINDS",
    "R_HAT_MAX",
    "Posterior",
    "Prior",
    "posterior_ancestral_states",
    "sample_posterior",
]

# Vehtari et al. (2021): R-hat at most 1.01, bulk and tail ESS at least 400.
R_HAT_MAX = 1.01
ESS_MIN = 400
METHOD = "bridge sampling (Meng & Wong 1996)"
# Prior() (frozen): exponential with mean 1 change along the tree's height.
DEFAULT_PRIOR = Prior()
# A log-uniform prior's bound is called reached when this share of the draws lies
# within 1% (in ln) of it.
_BOUND_SHARE = 0.01


@dataclass
class Posterior:
    """Draws of one model on one tree, with their diagnostics and the log marginal
    likelihood.

    labels            free-rate labels in the model's order, then the treatment's
                      parameter name if one is estimated
    draws             [chains, draws, n_params]: rates per branch-length unit (the unit
                      of rates.tsv); a branch parameter in its reported unit
    log_likelihood    [chains, draws]
    ess_bulk, ess_tail, r_hat   [n_params], from ArviZ
    flagged           any r_hat > 1.01 or ESS (bulk or tail) < 400
    """

    labels: tuple
    draws: np.ndarray
    log_likelihood: np.ndarray
    ess_bulk: np.ndarray
    ess_tail: np.ndarray
    r_hat: np.ndarray
    flagged: bool
    log_marginal_likelihood: float
    mc_error: float
    method: str
    notes: list = field(default_factory=list)
    divergences: int = 0
    seconds: float = 0.0


def _diagnostics(draws):
    """(ess_bulk, ess_tail, r_hat), each [n_params], of draws [chains, draws, n]."""
    import arviz as az

    n = draws.shape[2]
    data = az.convert_to_dataset({f"p{i}": draws[:, :, i] for i in range(n)})
    bulk = az.ess(data, method="bulk")
    tail = az.ess(data, method="tail")
    rhat = az.rhat(data, method="rank")
    pick = lambda ds: np.array([float(ds[f"p{i}"]) for i in range(n)])  # noqa: E731
    return pick(bulk), pick(tail), pick(rhat)


def _starts(density, rng, chains, tries=50):
    """One finite starting point per chain (None if the density is -inf at every try)."""
    out = []
    for _ in range(chains):
        for _ in range(tries):
            z = density.start(rng)
            if np.isfinite(density(z)[0]):
                out.append(z)
                break
        else:
            return None
    return np.array(out)


def _empty(labels, chains, draws, note):
    n = len(labels)
    nan = np.full(n, np.nan)
    return Posterior(
        tuple(labels),
        np.full((chains, draws, n), np.nan),
        np.full((chains, draws), -np.inf),
        nan,
        nan.copy(),
        nan.copy(),
        True,
        -math.inf,
        math.nan,
        METHOD,
        [note],
    )


def sample_posterior(
    tree,
    tip_partials,
    model,
    *,
    root="uniform",
    branches=None,
    prior=DEFAULT_PRIOR,
    chains=4,
    warmup=500,
    draws=500,
    seed=0,
) -> Posterior:
    """Posterior draws, diagnostics and log marginal likelihood of ``model`` on ``tree``
    (module docstring). tip_partials are over the observed states (or a hidden-class
    model's combined states), as for ``fitting.fit_model``."""
    import time

    from .bridge import bridge_log_marginal
    from .density import LogPosterior
    from .sampler import run_chains

    t0 = time.process_time()
    treatment = branches or Treatment()
    labels = tuple(model.labels) + ((treatment.name,) if treatment.free else ())
    density = LogPosterior(tree, tip_partials, model, root, treatment, prior)
    n, p = density.n, density.p
    seq = np.random.SeedSequence([int(seed) % (2**63), 23])
    start_seed, chain_seed, bridge_seed = seq.spawn(3)
    if n == 0:
        ll = density.log_likelihood(np.zeros(0))
        post = _empty(labels, chains, draws, "the model has no free parameter")
        post.log_likelihood[:] = ll
        post.log_marginal_likelihood, post.mc_error = ll, 0.0
        post.flagged = not np.isfinite(ll)
        post.method = "no free parameter: the marginal likelihood is the likelihood"
        return post
    starts = _starts(density, np.random.default_rng(start_seed), chains)
    if starts is None:
        return _empty(
            labels,
            chains,
            draws,
            "the data are impossible (or the prior is 0) at every starting point tried",
        )
    z, log_q, stats = run_chains(
        density,
        n,
        starts,
        chains,
        warmup,
        draws,
        int(chain_seed.generate_state(1, np.uint64)[0] >> np.uint64(1)),
    )
    notes = []
    log_shift = 0.0
    log_q_fn = lambda x: density(x)[0]  # noqa: E731
    if model.n_classes > 1:
        # renumber the classes of every draw slowest first; bridge on that region
        for c in range(chains):
            for d in range(draws):
                order = relabel_classes(model, np.exp(z[c, d, :p]))
                z[c, d, :p] = z[c, d, :p][order]
        identity = np.arange(p)

        def log_q_fn(x):
            if not np.array_equal(relabel_classes(model, np.exp(x[:p])), identity):
                return -math.inf
            return density(x)[0]

        log_shift = math.lgamma(model.n_classes + 1)
    log_lik = log_q - density.log_prior_many(z)
    reported = density.reported(z)
    ess_bulk, ess_tail, r_hat = _diagnostics(reported)
    log_ml, mc_error = bridge_log_marginal(log_q_fn, z, log_q, np.random.default_rng(bridge_seed))
    log_ml += log_shift
    divergences = int(stats["diverging"].sum())
    if divergences:
        notes.append(
            f"{divergences} of {chains * draws} draws ended in a divergent transition: the "
            "posterior may be explored incompletely"
        )
    depth = int(stats["maxdepth"].sum())
    if depth:
        notes.append(f"{depth} draws reached the sampler's largest trajectory")
    if prior.kind == "log_uniform":
        s = np.exp(z[:, :, :p] + density.log_height)
        for i in range(p):
            for bound, side in ((prior.lower, "lower"), (prior.upper, "upper")):
                near = np.mean(np.abs(np.log(s[:, :, i] / bound)) < 0.01)
                if near >= _BOUND_SHARE:
                    notes.append(
                        f"{labels[i]}: {near:.0%} of the draws lie at the prior's {side} "
                        f"bound ({bound:g} changes along the tree's height): the data do not "
                        "bound this rate and the prior decides it"
                    )
    flagged = bool(
        np.any(~(r_hat <= R_HAT_MAX))
        or np.any(~(ess_bulk >= ESS_MIN))
        or np.any(~(ess_tail >= ESS_MIN))
    )
    if flagged:
        worst = []
        if np.any(~(r_hat <= R_HAT_MAX)):
            finite = r_hat[np.isfinite(r_hat)]
            most = f"{finite.max():.3f}" if finite.size else "undefined"
            worst.append(f"largest R-hat {most} (> {R_HAT_MAX})")
        low = np.minimum(ess_bulk, ess_tail)
        if np.any(~(low >= ESS_MIN)):
            finite = low[np.isfinite(low)]
            least = f"{math.floor(finite.min())}" if finite.size else "undefined"
            worst.append(f"smallest ESS {least} (< {ESS_MIN})")
        notes.append("not converged: " + "; ".join(worst))
    return Posterior(
        labels,
        reported,
        log_lik,
        ess_bulk,
        ess_tail,
        r_hat,
        flagged,
        float(log_ml),
        float(mc_error),
        METHOD,
        notes,
        divergences,
        time.process_time() - t0,
    )


def posterior_ancestral_states(
    tree, tip_partials, model, posterior: Posterior, *, root="uniform", branches=None, n_draws=100
):
    """Posterior-mean marginal ancestral states, float [n_nodes, k_observed]: the marginal
    probabilities of Yang, Kumar & Nei (1995; ``ancestral.observed_marginals``) averaged
    over ``n_draws`` draws spread evenly over every chain (each draw on its own branch
    lengths where a treatment is estimated). Integrates the rates out instead of holding
    them at one estimate; about n_draws times one marginal computation."""
    from ..ancestral import observed_marginals
    from ..branches import transformed_tree

    treatment = branches or Treatment()
    flat = posterior.draws.reshape(-1, posterior.draws.shape[-1])
    flat = flat[np.all(np.isfinite(flat), axis=1)]
    if not len(flat):
        raise ValueError("the posterior has no finite draw")
    pick = flat[np.linspace(0, len(flat) - 1, min(n_draws, len(flat))).astype(int)]
    p = model.n_params
    base = transformed_tree(tree, treatment) if not treatment.free else tree
    total = None
    for d in pick:
        on = transformed_tree(tree, treatment, float(d[p])) if treatment.free else base
        m = observed_marginals(on, tip_partials, model.q_matrix(d[:p]), root, model)
        total = m if total is None else total + m
    return total / len(pick)
