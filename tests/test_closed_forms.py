"""Transition probabilities P(t) = exp(Q t) against closed forms and scipy.linalg.expm.

Sources, beside each check:
- scipy.linalg.expm -- general-purpose reference library
- P(0) = I, rows of P sum to 1, rows of Q sum to 0, P(s+t) = P(s) P(t) -- fact of the trade
- two-state chain, rates a (0->1) and b (1->0):
  P00(t) = b/(a+b) + a/(a+b) e^{-(a+b)t}, pi_0 = b/(a+b) -- standard textbook result,
  e.g. Harmon (2019) Phylogenetic Comparative Methods ch. 7 (from memory)
- k-state equal rates q: P_ii = 1/k + (k-1)/k e^{-kqt}, P_ij = 1/k - 1/k e^{-kqt} --
  Jukes & Cantor (1969) for k = 4; Lewis (2001) Syst. Biol. 50:913 for the Mk model
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg
from reference import q_from_rates

from mkforest.engine.likelihood import transition_matrices
from mkforest.engine.models import build_model

TIMES = np.array([0.0, 1e-12, 1e-6, 0.013, 0.2, 0.5, 1.0, 2.7, 10.0, 100.0])


def _expm_stack(Q, times):
    return np.array([scipy.linalg.expm(Q * t) for t in times])


def _random_q(rng, k, p_zero=0.0):
    off = rng.uniform(0.01, 3.0, size=(k, k))
    off[rng.random((k, k)) < p_zero] = 0.0
    return q_from_rates(off)


NAMED = {
    # non-reversible cycle 0->1->2->0 fast, reverse slow: complex eigenvalues
    "cycle": q_from_rates([[0, 5.0, 0.05], [0.05, 0, 5.0], [5.0, 0.05, 0]]),
    # pure cycle, no reverse at all
    "pure_cycle": q_from_rates([[0, 1.0, 0], [0, 0, 1.0], [1.0, 0, 0]]),
    # defective: chain 0->1->2 with equal rates, 2 absorbing (eigenvalue -1 twice, one eigenvector)
    "defective_chain": q_from_rates([[0, 1.0, 0], [0, 0, 1.0], [0, 0, 0]]),
    # nearly defective: rates differ by 1e-9 (eigenvectors nearly parallel)
    "nearly_defective": q_from_rates([[0, 1.0, 0], [0, 0, 1.0 + 1e-9], [0, 0, 0]]),
    # longer defective chain, four equal steps
    "defective_four": q_from_rates([[0, 2, 0, 0], [0, 0, 2, 0], [0, 0, 0, 2], [0, 0, 0, 0]]),
    # two absorbing states reached from a middle one
    "two_absorbing": q_from_rates([[0, 0, 0], [0.7, 0, 1.3], [0, 0, 0]]),
    # all-zero Q: nothing changes, P(t) = I
    "zero": np.zeros((3, 3)),
    # widely different time scales (stiff)
    "stiff": q_from_rates([[0, 1e3, 0], [1e-3, 0, 1e-3], [0, 1e2, 0]]),
}


@pytest.mark.parametrize("name", sorted(NAMED))
def test_named_matrices_match_scipy_expm(name):
    """transition_matrices == scipy.linalg.expm (general-purpose reference library)
    for complex-eigenvalue, defective, nearly defective, absorbing and stiff Q."""
    Q = NAMED[name]
    got = transition_matrices(Q, TIMES)
    assert got.shape == (len(TIMES), Q.shape[0], Q.shape[0])
    np.testing.assert_allclose(got, _expm_stack(Q, TIMES), rtol=0, atol=1e-10)


@pytest.mark.parametrize("seed", range(30))
def test_random_matrices_match_scipy_expm(seed):
    """Random dense and sparse (some rates 0) Q, k = 2..6 (scipy.linalg.expm,
    general-purpose reference library)."""
    rng = np.random.default_rng(seed)
    Q = _random_q(rng, int(rng.integers(2, 7)), p_zero=0.4 if seed % 2 else 0.0)
    times = rng.exponential(1.0, size=12)
    np.testing.assert_allclose(
        transition_matrices(Q, times), _expm_stack(Q, times), rtol=0, atol=1e-10
    )


@pytest.mark.parametrize("name", sorted(NAMED))
def test_identities(name):
    """P(0) = I; rows of P sum to 1 and entries lie in [0, 1]; P(s+t) = P(s) P(t)
    (fact of the trade). Rows of Q sum to 0 (fact of the trade)."""
    Q = NAMED[name]
    k = Q.shape[0]
    np.testing.assert_allclose(Q.sum(axis=1), 0.0, atol=1e-12)
    P = transition_matrices(Q, TIMES)
    np.testing.assert_array_equal(P[0], np.eye(k))
    # 1e-10: scipy.linalg.expm itself reaches 1 + 8e-11 on "nearly_defective" at t = 100,
    # so row sums and entries share the accuracy of the reference library
    np.testing.assert_allclose(P.sum(axis=2), 1.0, atol=1e-10)
    assert (P >= -1e-15).all() and (P <= 1 + 1e-10).all()
    s, t = 0.37, 1.4
    Ps, Pt, Pst = transition_matrices(Q, np.array([s, t, s + t]))
    np.testing.assert_allclose(Ps @ Pt, Pst, atol=1e-10)


@pytest.mark.parametrize("seed", range(10))
def test_q_from_models_rows_sum_to_zero_and_chapman_kolmogorov(seed):
    """Engine-built Q (unconstrained, random rates): rows sum to 0 and P(s+t) = P(s)P(t)
    (fact of the trade)."""
    rng = np.random.default_rng(100 + seed)
    k = int(rng.integers(2, 6))
    model = build_model("unconstrained", [f"s{i}" for i in range(k)])
    Q = model.q_matrix(rng.uniform(0.05, 4.0, size=model.n_params))
    np.testing.assert_allclose(Q.sum(axis=1), 0.0, atol=1e-12)
    s, t = rng.exponential(0.5, size=2)
    Ps, Pt, Pst = transition_matrices(Q, np.array([s, t, s + t]))
    np.testing.assert_allclose(Ps @ Pt, Pst, atol=1e-12)


@pytest.mark.parametrize("a,b", [(1.0, 1.0), (0.3, 1.7), (5.0, 0.02), (1e-4, 2.0), (0.0, 0.8)])
def test_two_state_closed_form(a, b):
    """P00 = b/(a+b) + a/(a+b) e^{-(a+b)t}; P11 = a/(a+b) + b/(a+b) e^{-(a+b)t}
    (standard textbook result, e.g. Harmon 2019 ch. 7 -- from memory)."""
    Q = q_from_rates([[0, a], [b, 0]])
    P = transition_matrices(Q, TIMES)
    s = a + b
    e = np.exp(-s * TIMES)
    p00 = b / s + a / s * e
    p11 = a / s + b / s * e
    np.testing.assert_allclose(P[:, 0, 0], p00, rtol=1e-12, atol=1e-14)
    np.testing.assert_allclose(P[:, 1, 1], p11, rtol=1e-12, atol=1e-14)
    np.testing.assert_allclose(P[:, 0, 1], 1 - p00, rtol=1e-10, atol=1e-14)
    np.testing.assert_allclose(P[:, 1, 0], 1 - p11, rtol=1e-10, atol=1e-14)


@pytest.mark.parametrize("k", [2, 3, 4, 5, 8])
@pytest.mark.parametrize("q", [0.05, 1.0, 3.3])
def test_equal_rates_closed_form(k, q):
    """P_ii = 1/k + (k-1)/k e^{-kqt}, P_ij = 1/k - 1/k e^{-kqt}
    (Jukes & Cantor 1969 for k = 4; Lewis 2001 Syst. Biol. 50:913 -- published sources)."""
    model = build_model("equal", [f"s{i}" for i in range(k)])
    P = transition_matrices(model.q_matrix([q]), TIMES)
    e = np.exp(-k * q * TIMES)
    diag = 1 / k + (k - 1) / k * e
    off = 1 / k - 1 / k * e
    for n, t in enumerate(TIMES):
        expected = np.full((k, k), off[n])
        np.fill_diagonal(expected, diag[n])
        np.testing.assert_allclose(P[n], expected, rtol=1e-12, atol=1e-15, err_msg=f"t={t}")


def test_long_time_limit_is_stationary():
    """As t grows every row of P(t) tends to pi, pi_0 = b/(a+b) for two states
    (standard textbook result -- from memory)."""
    a, b = 0.4, 1.1
    P = transition_matrices(q_from_rates([[0, a], [b, 0]]), np.array([500.0]))[0]
    np.testing.assert_allclose(P, [[b / (a + b), a / (a + b)]] * 2, rtol=1e-12)


def test_defective_chain_closed_form():
    """Chain 0 -> 1 -> 2 with equal rate r (defective Q): P00 = e^{-rt}, P01 = rt e^{-rt},
    P02 = 1 - e^{-rt} - rt e^{-rt} (Poisson process counts: fact of the trade)."""
    r = 1.7
    Q = q_from_rates([[0, r, 0], [0, 0, r], [0, 0, 0]])
    P = transition_matrices(Q, TIMES)
    e = np.exp(-r * TIMES)
    np.testing.assert_allclose(P[:, 0, 0], e, rtol=1e-10, atol=1e-15)
    np.testing.assert_allclose(P[:, 0, 1], r * TIMES * e, rtol=1e-9, atol=1e-15)
    np.testing.assert_allclose(P[:, 0, 2], 1 - e - r * TIMES * e, rtol=1e-9, atol=1e-15)


@pytest.mark.parametrize("seed", range(8))
def test_short_branches_small_entries_relatively_accurate(seed):
    """For short t the off-diagonal P_ij(t) = q_ij t + O(t^2) are tiny; they must be right
    in relative terms (they are the whole likelihood of a change on a short branch):
    relative error <= 1e-9 against scipy.linalg.expm (general-purpose reference
    library), itself confirmed here against the series I + Qt + Q^2 t^2/2 + Q^3 t^3/6
    (fact of the trade; truncation error O(t^4), negligible even for the smallest entries
    at t = 1e-6)."""
    rng = np.random.default_rng(200 + seed)
    k = int(rng.integers(2, 6))
    Q = _random_q(rng, k)
    times = np.array([1e-10, 1e-8, 1e-6])
    got = transition_matrices(Q, times)
    off = ~np.eye(k, dtype=bool)
    for n, t in enumerate(times):
        expected = scipy.linalg.expm(Q * t)
        series = np.eye(k) + Q * t + Q @ Q * t * t / 2 + Q @ Q @ Q * t**3 / 6
        np.testing.assert_allclose(expected[off], series[off], rtol=1e-10)  # reference sanity
        np.testing.assert_allclose(got[n][off], expected[off], rtol=1e-9, err_msg=f"t={t}")
