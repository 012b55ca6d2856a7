"""The Bayesian room (mkforest.engine.bayes) against outside references.

Sources, beside each check:
- posterior means, quantiles and the log marginal likelihood of 1- and 2-rate models on
  small trees: numerical integration of likelihood x prior over the rates with SciPy
  (``scipy.integrate.quad``; Gauss-Legendre tensor grids from NumPy for two rates) on
  the plain reference pruning (tests/reference.py, scipy.linalg.expm per branch), as
  references.md prescribes; Monte Carlo error of the draws from ArviZ (``az.mcse``,
  Vehtari et al. 2021)
- prior densities: ``scipy.stats`` (expon, gamma, loguniform) -- general-purpose library
- the change of variables y = ln s adds ln s to the log density (fact of the trade)
- bridge sampling on a normal of known normalising constant (closed form: the integral
  of exp(-x'A x / 2) is (2 pi)^(n/2) det(A)^(-1/2); fact of the trade)
- with a log-uniform prior (flat in log-rate) the highest posterior draw sits at the
  maximum-likelihood estimate (no outside value: a sanity check)
"""

from __future__ import annotations

import math

import arviz as az
import numpy as np
import pytest
import scipy.integrate
import scipy.stats
from reference import pruning_log_likelihood, q_from_rates, ref_tree_from_newick

from mkforest.data.trees import parse_newick
from mkforest.engine.bayes import Prior, sample_posterior
from mkforest.engine.bayes.bridge import bridge_log_marginal
from mkforest.engine.bayes.density import LogPosterior
from mkforest.engine.fitting import fit_model
from mkforest.engine.hidden import with_hidden_classes
from mkforest.engine.models import build_model
from mkforest.engine.treatments import Treatment
from mkforest.errors import InputError

NEWICK = "((a:0.3,b:0.5):0.4,((c:0.2,d:0.2):0.5,(e:0.6,f:0.1):0.1):0.2);"
CELLS = {"a": 0, "b": 1, "c": 1, "d": 1, "e": 0, "f": 1}
STATES = ("s0", "s1")


def _case():
    tree = parse_newick(NEWICK)
    ref = ref_tree_from_newick(NEWICK)
    part = lambda labels: np.eye(2)[[CELLS[t] for t in labels]]  # noqa: E731
    return tree, part(tree.tip_labels), ref, part(ref.tip_labels)


def _ref_ll(ref, X, r01, r10):
    return pruning_log_likelihood(ref, X, q_from_rates([[0.0, r01], [r10, 0.0]]))


def _mcse(draws, method, **kw):
    return float(az.mcse(az.convert_to_dataset({"x": draws}), method=method, **kw)["x"])


# ------------------------------------------------------------------ 1 rate, scipy quad


def test_one_rate_posterior_and_marginal_likelihood_match_quad():
    """Equal-rates binary model, exponential prior (mean 1 change along H) on r H:
    posterior mean and 2.5/50/97.5% quantiles of r within 4 Monte Carlo standard errors
    of the values integrated with scipy.integrate.quad (mean, ln ML) and a dense log-rate
    grid (quantiles) on the reference pruning; ln ML within 0.05."""
    tree, X, ref, Xr = _case()
    H = tree.height
    prior = Prior("exponential", mean=1.0)
    # density of y = ln r: L(r) p_s(r H) H r  (p_s: exponential; scipy.stats.expon)
    shift = _ref_ll(ref, Xr, 2.0, 2.0)

    def f(y, power=0):
        r = math.exp(y)
        ll = _ref_ll(ref, Xr, r, r)
        return math.exp(ll - shift + scipy.stats.expon.logpdf(r * H) + math.log(H * r) + power * y)

    lo, hi = math.log(1e-7 / H), math.log(60.0 / H)
    z0 = scipy.integrate.quad(f, lo, hi, epsabs=0, epsrel=1e-10, limit=200)[0]
    z1 = scipy.integrate.quad(f, lo, hi, args=(1,), epsabs=0, epsrel=1e-10, limit=200)[0]
    log_ml_ref = math.log(z0) + shift
    mean_ref = z1 / z0
    grid = np.linspace(lo, hi, 1501)
    dens = np.array([f(y) for y in grid])
    cdf = np.concatenate([[0], np.cumsum((dens[1:] + dens[:-1]) / 2 * np.diff(grid))])
    cdf /= cdf[-1]
    q_ref = np.exp(np.interp([0.025, 0.5, 0.975], cdf, grid))

    post = sample_posterior(
        tree, X, build_model("equal", STATES), prior=prior, warmup=500, draws=1000, seed=11
    )
    r = post.draws[:, :, 0]
    assert post.labels == ("rate",) and not post.flagged
    assert abs(r.mean() - mean_ref) < 4 * _mcse(r, "mean"), (r.mean(), mean_ref)
    for q, ref_q in zip((0.025, 0.5, 0.975), q_ref):
        got = np.quantile(r, q)
        assert abs(got - ref_q) < 4 * _mcse(r, "quantile", prob=q), (q, got, ref_q)
    assert abs(post.log_marginal_likelihood - log_ml_ref) < 0.05, (
        post.log_marginal_likelihood,
        log_ml_ref,
    )
    assert 0 < post.mc_error < 0.05


# ----------------------------------------------------- 2 rates, Gauss-Legendre tensor grid


def _gauss_legendre(lo, hi, panels, nodes):
    x, w = np.polynomial.legendre.leggauss(nodes)
    edges = np.linspace(lo, hi, panels + 1)
    xs = np.concatenate([(a + b) / 2 + (b - a) / 2 * x for a, b in zip(edges[:-1], edges[1:])])
    ws = np.concatenate([(b - a) / 2 * w for a, b in zip(edges[:-1], edges[1:])])
    return xs, ws


@pytest.mark.parametrize(
    "prior",
    [Prior("exponential", mean=1.0), Prior("gamma", shape=2.0, mean=0.5)],
    ids=["exponential", "gamma"],
)
def test_two_rate_posterior_and_marginal_likelihood_match_integration(prior):
    """Unconstrained binary model (two rates): posterior means of both rates within 4
    Monte Carlo standard errors, and ln ML within 0.05, of a composite Gauss-Legendre
    integration over both log-rates (NumPy's nodes; 6 panels x 8 nodes per axis,
    reference pruning; priors from scipy.stats). The grid's own error: 12 panels x 12
    nodes move its ln ML by 1.6e-6 and the means by 1e-6 (checked when written)."""
    tree, X, ref, Xr = _case()
    H = tree.height
    if prior.kind == "exponential":
        logpdf = scipy.stats.expon(scale=prior.mean).logpdf
    else:
        logpdf = scipy.stats.gamma(prior.shape, scale=prior.mean / prior.shape).logpdf
    ys, ws = _gauss_legendre(math.log(1e-6 / H), math.log(40.0 / H), 6, 8)
    r = np.exp(ys)
    lp1 = logpdf(r * H) + np.log(r * H)  # prior of y = ln r with its Jacobian
    ll = np.array([[_ref_ll(ref, Xr, a, b) for b in r] for a in r])
    log_f = ll + lp1[:, None] + lp1[None, :]
    m = log_f.max()
    f = np.exp(log_f - m) * ws[:, None] * ws[None, :]
    z = f.sum()
    log_ml_ref = math.log(z) + m
    mean_ref = np.array([(f * r[:, None]).sum(), (f * r[None, :]).sum()]) / z

    model = build_model("unconstrained", STATES)
    post = sample_posterior(tree, X, model, prior=prior, warmup=500, draws=1000, seed=3)
    assert not post.flagged, post.notes
    for i in range(2):
        d = post.draws[:, :, i]
        assert abs(d.mean() - mean_ref[i]) < 4 * _mcse(d, "mean"), (i, d.mean(), mean_ref[i])
    assert abs(post.log_marginal_likelihood - log_ml_ref) < 0.05, (
        post.log_marginal_likelihood,
        log_ml_ref,
    )


# ------------------------------------------------------------------ density and prior


@pytest.mark.parametrize(
    "prior,ref_logpdf",
    [
        (Prior("exponential", mean=2.0), scipy.stats.expon(scale=2.0).logpdf),
        (Prior("gamma", shape=3.0, mean=0.5), scipy.stats.gamma(3.0, scale=0.5 / 3).logpdf),
        (
            Prior("log_uniform", lower=1e-3, upper=1e2),
            scipy.stats.loguniform(1e-3, 1e2).logpdf,
        ),
    ],
    ids=["exponential", "gamma", "log_uniform"],
)
def test_density_is_reference_likelihood_plus_prior_with_jacobian(prior, ref_logpdf):
    """ln density = reference ln L + sum_i [ln p(r_i H) + ln(r_i H)] (priors from
    scipy.stats; the Jacobian of y = ln s, fact of the trade), and its gradient matches
    central differences of itself to 1e-6."""
    tree, X, ref, Xr = _case()
    H = tree.height
    density = LogPosterior(tree, X, build_model("unconstrained", STATES), "uniform", None, prior)
    for rates in ([0.7, 1.9], [0.05, 0.3], [3.0, 0.2]):
        z = np.log(rates)
        s = np.asarray(rates) * H
        want = _ref_ll(ref, Xr, *rates) + float(np.sum(ref_logpdf(s) + np.log(s)))
        value, grad = density(z)
        assert abs(value - want) < 1e-9, (value, want)
        assert abs(density.log_prior_many(z[None])[0] - (value - _ref_ll(ref, Xr, *rates))) < 1e-9
        for i in range(2):
            e = np.zeros(2)
            e[i] = 1e-5
            fd = (density(z + e)[0] - density(z - e)[0]) / 2e-5
            assert abs(grad[i] - fd) < 1e-6 * max(1.0, abs(fd)), (i, grad[i], fd)


def test_log_uniform_prior_is_zero_outside_its_range():
    """Outside [lower, upper] (in changes along H) the log-uniform prior is 0: ln density -inf."""
    tree, X, _, _ = _case()
    density = LogPosterior(
        tree,
        X,
        build_model("equal", STATES),
        "uniform",
        None,
        Prior("log_uniform", 0.1, 1, 0.01, 10),
    )
    H = tree.height
    assert np.isfinite(density(np.log([1.0 / H]))[0])
    assert density(np.log([20.0 / H]))[0] == -math.inf
    assert density(np.log([0.005 / H]))[0] == -math.inf


@pytest.mark.parametrize("name", ["lambda", "kappa", "delta", "early_burst"])
def test_treatment_density_gradient_matches_central_differences(name):
    """With an estimated branch treatment: the density's gradient (rates and the logit of
    the treatment value) matches central differences to 1e-5 relative; its value is the
    reference pruning on the transformed tree plus the priors (uniform on the range:
    ln(sigma (1 - sigma)) in the logit, fact of the trade)."""
    from reference import transformed_newick

    tree, X, _, _ = _case()
    treatment = Treatment(name)
    density = LogPosterior(
        tree, X, build_model("unconstrained", STATES), "uniform", treatment, Prior()
    )
    z = np.array([math.log(0.8), math.log(1.7), 0.4])
    value, grad = density(z)
    for i in range(3):
        e = np.zeros(3)
        e[i] = 1e-5
        fd = (density(z + e)[0] - density(z - e)[0]) / 2e-5
        assert abs(grad[i] - fd) < 1e-5 * max(1.0, abs(fd)), (name, i, grad[i], fd)
    x = density.branch_x(0.4)
    theta = treatment.theta(x, tree)
    ref = ref_tree_from_newick(transformed_newick(NEWICK, name, theta))
    Xr = np.eye(2)[[CELLS[t] for t in ref.tip_labels]]
    sig = 1 / (1 + math.exp(-0.4))
    s = np.array([0.8, 1.7]) * tree.height
    want = (
        _ref_ll(ref, Xr, 0.8, 1.7)
        + float(np.sum(scipy.stats.expon.logpdf(s) + np.log(s)))
        + math.log(sig * (1 - sig))
    )
    assert abs(value - want) < 1e-8, (value, want)


# ------------------------------------------------------------------ bridge sampling


def test_bridge_sampling_recovers_a_known_normalising_constant():
    """q(x) = c exp(-x'A x / 2): its integral is c (2 pi)^(n/2) det(A)^(-1/2) (closed
    form). Exact draws in 4 chains; the estimate lies within 0.02 and within 5 of its
    own Monte Carlo errors."""
    rng = np.random.default_rng(4)
    B = rng.normal(size=(3, 3))
    A = B @ B.T + 3 * np.eye(3)
    log_c = 2.5
    want = log_c + 1.5 * math.log(2 * math.pi) - 0.5 * math.log(np.linalg.det(A))
    cov = np.linalg.inv(A)
    z = rng.multivariate_normal(np.zeros(3), cov, size=(4, 400))
    log_q = lambda x: log_c - 0.5 * x @ A @ x  # noqa: E731
    lq = np.einsum("cdi,ij,cdj->cd", z, A, z) * -0.5 + log_c
    got, err = bridge_log_marginal(log_q, z, lq, np.random.default_rng(5))
    assert abs(got - want) < 0.02 and abs(got - want) < 5 * err, (got, want, err)
    assert 0 < err < 0.02


# ------------------------------------------------------------------ mode, seeds, flags


def test_flat_prior_posterior_peak_is_the_maximum_likelihood_estimate():
    """Log-uniform prior over a wide range (flat in log-rate): the draw of highest ln L
    lies within 0.05 of fit_model's maximum ln L (never above it by more than rounding),
    and its log-rates within 0.25 posterior standard deviations of the estimate."""
    rng = np.random.default_rng(8)
    from conftest import yule_newick

    tree = parse_newick(yule_newick(rng, 60, height=1.0))
    model = build_model("unconstrained", STATES)
    from mkforest.engine.simulate import simulate_states, tip_partials_from_states

    s = simulate_states(tree, model.q_matrix(np.array([1.0, 2.5])), rng)
    X = tip_partials_from_states(s, tree.n_tips, 2)
    fit = fit_model(tree, X, model, n_starts=3, seed=0)
    post = sample_posterior(
        tree, X, model, prior=Prior("log_uniform", lower=1e-4, upper=1e4), seed=2
    )
    ll = post.log_likelihood.ravel()
    best = int(np.argmax(ll))
    assert fit.log_likelihood - 0.05 < ll[best] <= fit.log_likelihood + 1e-7
    y = np.log(post.draws.reshape(-1, 2))
    dist = np.abs(y[best] - np.log(fit.rates)) / y.std(axis=0)
    assert np.all(dist < 0.25), dist


def test_seeded_draws_repeat_and_differ_by_seed():
    """The same seed gives the same draws bit for bit; another seed other draws."""
    tree, X, _, _ = _case()
    model = build_model("unconstrained", STATES)
    a = sample_posterior(tree, X, model, warmup=100, draws=100, seed=1)
    b = sample_posterior(tree, X, model, warmup=100, draws=100, seed=1)
    c = sample_posterior(tree, X, model, warmup=100, draws=100, seed=2)
    assert (
        np.array_equal(a.draws, b.draws) and a.log_marginal_likelihood == b.log_marginal_likelihood
    )
    assert not np.array_equal(a.draws, c.draws)


def test_short_run_is_flagged_with_the_reason():
    """Too few draws for ESS 400 (Vehtari et al. 2021): flagged, and the note says why."""
    tree, X, _, _ = _case()
    post = sample_posterior(tree, X, build_model("unconstrained", STATES), warmup=50, draws=40)
    assert post.flagged
    assert any("smallest ESS" in n for n in post.notes), post.notes


def test_log_likelihood_of_draws_is_the_reference_likelihood():
    """Posterior.log_likelihood at a draw equals the reference pruning at that draw's rates."""
    tree, X, ref, Xr = _case()
    post = sample_posterior(tree, X, build_model("unconstrained", STATES), warmup=100, draws=50)
    for c, d in ((0, 0), (1, 17), (3, 49)):
        r = post.draws[c, d]
        assert abs(post.log_likelihood[c, d] - _ref_ll(ref, Xr, *r)) < 1e-8


def test_hidden_classes_draws_are_numbered_slowest_first():
    """Two hidden classes: every draw has class 1 slower than class 2 (as ML fits
    number them), and the run reports the classes' switching rate as a parameter."""
    tree, X, _, _ = _case()
    model = with_hidden_classes(build_model("equal", STATES), 2, "equal")
    post = sample_posterior(tree, X, model, warmup=150, draws=100, seed=4)
    assert post.labels == model.labels
    i1, i2 = model.labels.index("rate@1"), model.labels.index("rate@2")
    assert np.all(post.draws[:, :, i1] <= post.draws[:, :, i2])
    assert np.isfinite(post.log_marginal_likelihood)


def test_treatment_parameter_is_reported_in_its_unit_within_its_range():
    """An estimated lambda is the last parameter, named by its treatment, in [0, 1]."""
    tree, X, _, _ = _case()
    post = sample_posterior(
        tree, X, build_model("equal", STATES), branches=Treatment("lambda"), warmup=150, draws=100
    )
    assert post.labels == ("rate", "lambda")
    lam = post.draws[:, :, 1]
    assert np.all((lam > 0) & (lam < 1)) and lam.std() > 0


# ------------------------------------------------------------------ config parsing


@pytest.mark.parametrize(
    "block,words",
    [
        (
            {"exponentail": {"mean": 1}},
            ["bayes.prior", "exponentail", "Did you mean 'exponential'"],
        ),
        ({"gamma": {"mean": -1}}, ["bayes.prior.gamma.mean", "positive"]),
        ({"gamma": {"scale": 1}}, ["bayes.prior.gamma", "'scale'", "shape, mean"]),
        ({"log_uniform": {"lower": 5, "upper": 1}}, ["bayes.prior.log_uniform", "below upper"]),
        ({"exponential": {"mean": 1}, "gamma": {}}, ["bayes.prior", "one prior"]),
        ("exponential", ["bayes.prior", "one prior"]),
    ],
)
def test_prior_config_mistakes_name_the_key(block, words):
    with pytest.raises(InputError) as err:
        Prior.from_config(block, "bayes.prior")
    for w in words:
        assert w in str(err.value), (w, str(err.value))


def test_prior_config_reads_values_and_defaults():
    assert Prior.from_config({"exponential": {"mean": 2}}, "p") == Prior("exponential", mean=2.0)
    assert Prior.from_config({"gamma": {"shape": 3}}, "p") == Prior("gamma", shape=3.0)
    assert Prior.from_config({"log_uniform": None}, "p") == Prior("log_uniform")
    assert Prior.from_config(None, "p") == Prior()


def test_posterior_mean_root_state_matches_quad():
    """Posterior-mean marginal probability of the root's state under the equal-rates model
    (uniform root): the reference is the integral of L_0(r) / (L_0(r) + L_1(r)) over the
    posterior of r (scipy.integrate.quad on the reference pruning's root partials,
    Yang, Kumar & Nei 1995 for the marginal at the root); within 4 Monte Carlo standard
    errors of the average over every draw."""
    from reference import pruning_root_log_partials

    from mkforest.engine.bayes import posterior_ancestral_states

    tree, X, ref, Xr = _case()
    H = tree.height
    shift = _ref_ll(ref, Xr, 2.0, 2.0)

    def f(y, marginal=False):
        r = math.exp(y)
        Q = q_from_rates([[0.0, r], [r, 0.0]])
        p, _ = pruning_root_log_partials(ref, Xr, Q)
        w = math.exp(_ref_ll(ref, Xr, r, r) - shift + scipy.stats.expon.logpdf(r * H) + y)
        return w * (p[0] / p.sum() if marginal else 1.0)

    lo, hi = math.log(1e-7 / H), math.log(60.0 / H)
    z0 = scipy.integrate.quad(f, lo, hi, epsabs=0, epsrel=1e-10, limit=200)[0]
    z1 = scipy.integrate.quad(f, lo, hi, args=(True,), epsabs=0, epsrel=1e-10, limit=200)[0]
    want = z1 / z0
    model = build_model("equal", STATES)
    post = sample_posterior(tree, X, model, warmup=500, draws=500, seed=21)
    got = posterior_ancestral_states(tree, X, model, post, n_draws=2000)[tree.n_nodes - 1, 0]

    def root_marginal(r):
        p = pruning_root_log_partials(ref, Xr, q_from_rates([[0, r], [r, 0]]))[0]
        return p[0] / p.sum()

    per_draw = np.array([root_marginal(r) for r in post.draws[:, :, 0].ravel()])
    per_draw = per_draw.reshape(post.draws.shape[:2])
    assert abs(per_draw.mean() - got) < 1e-9  # the engine's marginals are the reference's
    assert abs(got - want) < 4 * _mcse(per_draw, "mean"), (got, want)


@pytest.mark.parametrize("root", ["uniform", "stationary", "data_weighted", "y"])
def test_awkward_trees_and_tables_every_root(root):
    """Polytomies, zero-length branches, missing and ambiguous tips, a 3-state symmetric
    model, every root treatment: the run finishes, ln ML is finite, and ln L at draws is
    the reference pruning's (tests/reference.py) with that root."""
    from conftest import partials_from_cells, random_newick, tip_data_mapping

    rng = np.random.default_rng({"uniform": 1, "stationary": 2, "data_weighted": 3, "y": 4}[root])
    states = ["x", "y", "z"]
    newick = random_newick(rng, 9, p_polytomy=0.4, p_zero=0.2)
    ref = ref_tree_from_newick(newick)
    Q = q_from_rates(np.full((3, 3), 0.8))
    cells = tip_data_mapping(rng, ref, Q, states, p_missing=0.2, p_ambiguous=0.3)
    tree = parse_newick(newick)
    X = partials_from_cells(cells, tree.tip_labels, states)
    Xr = partials_from_cells(cells, ref.tip_labels, states)
    model = build_model("symmetric", tuple(states))
    post = sample_posterior(tree, X, model, root=root, warmup=150, draws=60, seed=5)
    assert np.isfinite(post.log_marginal_likelihood) and np.isfinite(post.mc_error)
    for c, d in ((0, 0), (2, 31)):
        Qd = model.q_matrix(post.draws[c, d])
        want = pruning_log_likelihood(ref, Xr, Qd, root, states)
        assert abs(post.log_likelihood[c, d] - want) < 1e-8, (root, post.log_likelihood[c, d], want)


def test_lambda_posterior_and_marginal_likelihood_match_integration():
    """Equal-rates model with an estimated lambda (uniform prior on [0, 1]): ln ML within
    0.05 and the posterior means of the rate and of lambda within 4 Monte Carlo standard
    errors of a Gauss-Legendre integration over (ln rate, lambda) (NumPy's nodes) of the
    reference pruning on the lambda-transformed tree (tests/reference.py) times the
    priors (scipy.stats.expon on rate x H)."""
    from reference import transformed_newick

    tree, X, _, _ = _case()
    H = tree.height
    ys, wy = _gauss_legendre(math.log(1e-6 / H), math.log(40.0 / H), 6, 8)
    lams, wl = _gauss_legendre(0.0, 1.0, 4, 8)
    r = np.exp(ys)
    lp = scipy.stats.expon.logpdf(r * H) + np.log(r * H)
    log_f = np.empty((len(lams), len(r)))
    for i, lam in enumerate(lams):
        ref = ref_tree_from_newick(transformed_newick(NEWICK, "lambda", float(lam)))
        Xr = np.eye(2)[[CELLS[t] for t in ref.tip_labels]]
        log_f[i] = [_ref_ll(ref, Xr, a, a) for a in r]
    log_f += lp[None, :]
    m = log_f.max()
    f = np.exp(log_f - m) * wl[:, None] * wy[None, :]
    z = f.sum()
    log_ml_ref = math.log(z) + m
    mean_rate, mean_lam = (f * r[None, :]).sum() / z, (f * lams[:, None]).sum() / z

    model = build_model("equal", STATES)
    post = sample_posterior(
        tree, X, model, branches=Treatment("lambda"), warmup=500, draws=1000, seed=9
    )
    assert post.labels == ("rate", "lambda")
    for i, want in ((0, mean_rate), (1, mean_lam)):
        d = post.draws[:, :, i]
        assert abs(d.mean() - want) < 4 * _mcse(d, "mean"), (i, d.mean(), want)
    assert abs(post.log_marginal_likelihood - log_ml_ref) < 0.05, (
        post.log_marginal_likelihood,
        log_ml_ref,
    )
