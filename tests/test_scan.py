"""The all-pairs scan's engine (mkforest.engine.scan) against outside references.

Sources, beside each check:
- independent hypothesis of two traits = the two traits' separate chains: its
  maximum ln L is the sum of theirs (uniform, stationary and data-weighted root) --
  Pagel (1994) Proc. R. Soc. B 255:37 for the model; checked against the project's
  own joint fit (engine/pairs.py, itself checked against a brute-force sum over
  interior joint states in tests/test_pairs.py)
- exp((Q1 (+) Q2) t) = exp(Q1 t) (x) exp(Q2 t) -- handbook identity (Horn & Johnson,
  Topics in Matrix Analysis, ch. 4; from memory), checked with scipy.linalg.expm
- independent vs dependent on two binary traits: 4 degrees of freedom; one trait
  depending on the other: 2 -- Pagel (1994)
- chi-square tail -- scipy.stats.chi2 (general-purpose reference library)
- Benjamini-Hochberg adjusted p-values -- Benjamini & Hochberg (1995) J. R. Stat. Soc.
  B 57:289 (published source), reproduced by scipy.stats.false_discovery_control
  (general-purpose reference library)
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg
from conftest import random_newick, yule_newick
from scipy.stats import chi2, false_discovery_control

from mkforest.data.traits import trait_from_mapping
from mkforest.data.trees import parse_newick
from mkforest.engine import fdr, pairs, scan
from mkforest.engine.fitting import LogLikelihood, fit_model
from mkforest.engine.simulate import simulate_states

ROOTS = ("uniform", "stationary", "data_weighted")


def _binary(rng, tree, name, states, rate=1.0, p_missing=0.15):
    q = np.array([[-rate, rate], [rate, -rate]])
    nodes = simulate_states(tree, q, rng)
    cells = {
        t: "?" if rng.random() < p_missing else states[nodes[v]]
        for v, t in enumerate(tree.tip_labels)
    }
    return trait_from_mapping(name, cells, states)


def _data(seed, n_tips=30, polytomies=False):
    rng = np.random.default_rng(seed)
    text = random_newick(rng, n_tips) if polytomies else yule_newick(rng, n_tips)
    tree = parse_newick(text)
    a = _binary(rng, tree, "spines", ("none", "spined"))
    b = _binary(rng, tree, "burrow", ("no", "yes"), rate=2.0)
    return tree, a, b


def test_kronecker_sum_is_product_of_transition_matrices():
    # handbook identity (from memory), checked with scipy.linalg.expm
    q1 = np.array([[-0.7, 0.7], [1.9, -1.9]])
    q2 = np.array([[-0.2, 0.2], [0.5, -0.5]])
    q = scan.independent_q(q1, q2)
    for t in (0.0, 0.3, 2.5):
        np.testing.assert_allclose(
            scipy.linalg.expm(q * t),
            np.kron(scipy.linalg.expm(q1 * t), scipy.linalg.expm(q2 * t)),
            atol=1e-12,
        )
    off = ~np.eye(4, dtype=bool)
    # a change of both traits at once (0,0)->(1,1) and (0,1)->(1,0) has rate 0
    assert q[0, 3] == 0.0 and q[1, 2] == 0.0 and np.count_nonzero(q[off]) == 8


@pytest.mark.parametrize("root", ROOTS)
@pytest.mark.parametrize("seed", [1, 2])
def test_independent_lnl_is_sum_of_single_fits(root, seed):
    """Pagel (1994) independence: the joint fit of engine/pairs.py's independent
    hypothesis reaches the sum of the two single unconstrained fits (to the optimiser's
    tolerance), and at the singles' rates the joint ln L equals the sum exactly."""
    tree, a, b = _data(seed, polytomies=seed == 2)
    s1 = scan.fit_single(tree, a, root, seed=seed)
    s2 = scan.fit_single(tree, b, root, seed=seed)
    pair = pairs.make_pair("p", a, b)
    joint = pair.joint_trait().tip_partials(tree)
    ind = pairs.hypothesis_model(pair, "independent")
    rates = scan.rates_from_q(ind, scan.independent_q(s1.q_matrix, s2.q_matrix))
    at_singles = LogLikelihood(tree, joint, ind, root)(rates)
    assert at_singles == pytest.approx(s1.log_likelihood + s2.log_likelihood, abs=1e-9)
    fitted = fit_model(tree, joint, ind, root, n_starts=3, seed=seed)
    assert fitted.log_likelihood == pytest.approx(s1.log_likelihood + s2.log_likelihood, abs=1e-4)


def test_dependent_starts_from_independent_and_p_matches_chi_square():
    tree, a, b = _data(5, n_tips=40)
    singles = tuple(scan.single_from_result(scan.fit_single(tree, t, seed=5)) for t in (a, b))
    rows = scan.test_pair(
        tree,
        a,
        b,
        singles,
        ("dependent", "first_depends_on_second", "second_depends_on_first"),
        seed=5,
        max_starts=1,  # only the independent start and nothing else: the hook must hold
        n_starts=1,
    )
    by = {r["alternative"]: r for r in rows}
    assert {h: r["df"] for h, r in by.items()} == {
        "dependent": 4,
        "first_depends_on_second": 2,
        "second_depends_on_first": 2,
    }
    for r in rows:
        # started at the independent optimum, the alternative cannot end below it
        assert r["log_likelihood_alternative"] >= r["log_likelihood_null"] - 1e-9
        stat = 2 * (r["log_likelihood_alternative"] - r["log_likelihood_null"])
        assert r["statistic"] == pytest.approx(max(stat, 0.0), abs=1e-12)
        assert r["p_value"] == pytest.approx(chi2.sf(r["statistic"], r["df"]), rel=1e-10)
        assert r["log_likelihood_null"] == singles[0].log_likelihood + singles[1].log_likelihood


def test_hidden_classes_fit_independent_jointly():
    tree, a, b = _data(3, n_tips=24)
    rows = scan.test_pair(tree, a, b, None, ("dependent",), hidden_classes=2, seed=3)
    (r,) = rows
    # with two classes: independent 4x2 + switch, dependent 8x2 + switch
    assert r["df"] == 8
    assert r["log_likelihood_alternative"] >= r["log_likelihood_null"] - 1e-9


@pytest.mark.parametrize("seed", range(5))
def test_bh_matches_scipy(seed):
    # Benjamini & Hochberg (1995) adjusted p-values == scipy.stats.false_discovery_control
    rng = np.random.default_rng(seed)
    p = np.concatenate([rng.uniform(size=40), rng.uniform(0, 1e-3, size=5), [0.2, 0.2, 1.0]])
    rng.shuffle(p)
    np.testing.assert_allclose(fdr.bh_adjusted(p), false_discovery_control(p), rtol=1e-12)


def test_bh_leaves_missing_p_values_out():
    p = np.array([0.01, np.nan, 0.04, 0.03, np.nan])
    q = fdr.bh_adjusted(p)
    assert np.isnan(q[1]) and np.isnan(q[4])
    np.testing.assert_allclose(q[[0, 2, 3]], false_discovery_control(p[[0, 2, 3]]), rtol=1e-12)
    assert np.isnan(fdr.bh_adjusted([np.nan])).all()


def test_scan_pairs_keeps_joint_chains_within_limit():
    tree, a, b = _data(1, n_tips=10)
    c = trait_from_mapping(
        "soil",
        {t: "clay" for t in tree.tip_labels[:5]}
        | {t: "sand" for t in tree.tip_labels[5:]}
        | {tree.tip_labels[0]: "loam"},
    )
    assert [(x.name, y.name) for x, y in scan.scan_pairs([a, b, c], 4)] == [("spines", "burrow")]
    assert len(scan.scan_pairs([a, b, c], 6)) == 3


def test_first_starts_run_before_the_seeded_starts():
    """fit_model(first_starts=...): the given point is start 0 and the seeded sequence
    follows unchanged (project behaviour; no outside value)."""
    tree, a, _ = _data(4, n_tips=30)
    model, X = scan.single_model(a), a.tip_partials(tree)
    far = np.full(model.n_params, 1e4 / tree.height)  # every rate at the upper bound
    given = fit_model(tree, X, model, first_starts=(far,), n_starts=2, max_starts=3, seed=1)
    plain = fit_model(tree, X, model, n_starts=2, max_starts=3, seed=1)
    assert given.n_starts == plain.n_starts + 1
    assert given.start_log_likelihoods[1:] == plain.start_log_likelihoods
    assert given.start_log_likelihoods[0] >= LogLikelihood(tree, X, model)(far)
    assert given.start_log_likelihoods[0] != plain.start_log_likelihoods[0]


def test_summary_leaves_impossible_trees_out_and_counts_them():
    """An impossible fit (ln L = -inf) is no test: left out of the medians and fractions,
    counted in n_impossible and said in the caution; q-values per tree from
    scipy.stats.false_discovery_control over that tree's tests."""
    import pandas as pd

    from mkforest.jobs.scan import PAIR_COLUMNS, per_tree_table, summary_table

    rows = []
    for t in range(3):
        for k, (a, b) in enumerate([("x", "y"), ("x", "z"), ("y", "z")]):
            impossible = t == 0 and k == 0
            rows.append(
                dict(
                    tree_set="s",
                    tree=t,
                    trait_1=a,
                    trait_2=b,
                    null="independent",
                    alternative="dependent",
                    n_taxa=10,
                    log_likelihood_null=-np.inf if impossible else -10.0,
                    log_likelihood_alternative=-8.0,
                    statistic=np.nan if impossible else 4.0 + k,
                    df=4,
                    p_value=np.nan if impossible else 0.02 * (k + 1) + 0.01 * t,
                    converged=True,
                    n_at_upper=0,
                    note="",
                )
            )
    per_tree = per_tree_table(pd.DataFrame(rows, columns=PAIR_COLUMNS), 0.05)
    for _, g in per_tree.groupby("tree"):
        ok = g["p_value"].notna()
        np.testing.assert_allclose(
            g.loc[ok, "q_value"], false_discovery_control(g.loc[ok, "p_value"]), rtol=1e-12
        )
    s = summary_table(per_tree, 0.05).set_index(["trait_1", "trait_2"])
    assert s.loc[("x", "y"), "n_trees"] == 2 and s.loc[("x", "y"), "n_impossible"] == 1
    assert "1 of 3 trees left out" in s.loc[("x", "y"), "caution"]
    assert s.loc[("x", "y"), "median_p"] == pytest.approx(np.median([0.03, 0.04]))
    assert s.loc[("x", "z"), "n_impossible"] == 0 and s.loc[("x", "z"), "n_trees"] == 3


def test_results_do_not_depend_on_the_grouping_of_pairs():
    """Seeds come from (tree, pair, hypothesis): one job or three give the same rows,
    bit for bit (project behaviour; no outside value)."""
    import pandas as pd

    from mkforest.jobs.scan import SINGLE_COLUMNS, pair_rows, read_singles, singles_rows

    rng = np.random.default_rng(8)
    trees = [parse_newick(yule_newick(rng, 14), index=i) for i in range(2)]
    traits = {
        n: _binary(rng, trees[0], n, ("no", "yes"))
        for n in ("crest", "webbing", "stripes", "venom")
    }
    config = {
        "seed": 3,
        "traits": {"columns": list(traits), "absent_taxa": "error"},
        "fitting": {"starts": 2, "lower": 1e-6, "upper": 1e4, "max_starts": 20},
        "scan": {
            "traits": "all",
            "joint_states": 4,
            "alternatives": ["dependent"],
            "root": "uniform",
            "hidden_classes": 1,
            "class_switch": "equal",
        },
    }
    table = pd.DataFrame(singles_rows(trees, traits, config), columns=SINGLE_COLUMNS)
    singles = read_singles(table.astype({"q_matrix": str}))

    def key(r):
        return (r["tree"], r["trait_1"], r["trait_2"])

    one = sorted(pair_rows(trees, traits, config, singles, 0, 1), key=key)
    three = sorted(
        (r for j in range(3) for r in pair_rows(trees, traits, config, singles, j, 3)), key=key
    )
    assert len(one) == 2 * 6 and one == three


def test_joint_state_limit_is_the_callers():
    """pairs stay at 12 joint states; the scan may ask for up to 16 (project rule)."""
    from mkforest.errors import InputError

    four = ("w", "x", "y", "z")
    taxa = [f"s{i}" for i in range(8)]
    a = trait_from_mapping("shell", {t: four[i % 4] for i, t in enumerate(taxa)}, four)
    b = trait_from_mapping("foot", {t: four[(i // 2) % 4] for i, t in enumerate(taxa)}, four)
    with pytest.raises(InputError, match="'shell' \\(4 states\\) and 'foot' \\(4 states\\)"):
        pairs.make_pair("p", a, b)
    assert len(pairs.make_pair("p", a, b, max_joint=16).states) == 16
