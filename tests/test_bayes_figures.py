"""The Bayesian figures at their widest, on invented tables in the shapes the summary job
writes (mkforest.jobs.bayes): every page within ``style.PAGE`` with no text below
``style.BODY_TEXT`` (tests/figure_checks.size_problems), nothing overlapping, and every
rate and analysis drawn once across the pages."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from figure_checks import overlaps, size_problems
from figure_data import large

from mkforest.engine.pairs import hypothesis_model
from mkforest.report import plots_bayes, style

HYPOTHESES = ["independent", "dependent", "first_depends_on_second", "second_depends_on_first"]


def posterior_tables(n_trees: int = 12, seed: int = 3):
    """A 4 x 2 trait pair (eight joint states) sampled under its four hypotheses: the
    pooled draws, per-tree intervals (two trees flagged) and both across-tree
    summaries of every rate (the dependent hypothesis alone has 32)."""
    rng = np.random.default_rng(seed)
    pair = next(iter(large().pairs.values()))
    pooled, per_tree, summary = {}, [], []
    for h in HYPOTHESES:
        model = hypothesis_model(pair, h)
        changes = {}
        for a, b, p in model.transitions():
            changes.setdefault(model.labels[p], []).append(f"{a}->{b}")
        for label, listed in changes.items():
            mu = rng.uniform(-1.5, 1.0)
            draws = np.exp(mu + 0.4 * rng.normal(size=(n_trees, 200)))
            pooled[(h, label)] = draws.ravel()
            for tree in range(n_trees):
                lo, med, hi = np.quantile(draws[tree], [0.025, 0.5, 0.975])
                per_tree.append(
                    dict(
                        model=h,
                        tree=tree,
                        parameter=label,
                        median=med,
                        low95=lo,
                        high95=hi,
                        flag="r_hat" if tree in (2, 7) else "",
                    )
                )
            for kind in ("trees_as_given", "trait_weighted"):
                lo, med, hi = np.quantile(draws, [0.025, 0.5, 0.975])
                summary.append(
                    dict(
                        model=h,
                        parameter=label,
                        changes=", ".join(listed),
                        summary=kind,
                        median=med,
                        low95=lo,
                        high95=hi,
                        n_trees=n_trees,
                        n_flagged=2,
                    )
                )
    return pair, pooled, pd.DataFrame(per_tree), pd.DataFrame(summary)


@pytest.mark.slow
def test_posterior_rates_of_the_widest_pair_fit_pages(tmp_path):
    """Four hypotheses of a pair with eight joint states (56 rates in all): drawn
    unpaged (the code before pages), the figure measured 7.90 x 117.80 in."""
    pair, pooled, per_tree, summary = posterior_tables()
    traits = (pair.first.name, pair.second.name)
    pages = plots_bayes.posterior_rate_pages(
        pooled, per_tree, summary, HYPOTHESES, "substrate_shell", traits
    )
    assert len(pages) > 1 and list(pages)[:2] == ["substrate_shell", "substrate_shell.part2"]
    labels, limits = [], set()
    for name, fig in pages.items():
        assert size_problems(fig) == [] and overlaps(fig) == [], name
        for ax in fig.axes:
            labels += [
                (ax.get_title(loc="left").split(":")[0], t.get_text()) for t in ax.get_yticklabels()
            ]
            limits.add(tuple(np.round(ax.get_xlim(), 9)))
    # every rate of every hypothesis once, and one rate axis across the pages
    assert len(labels) == len(pooled) == len(set(labels))
    assert len(limits) == 1
    page = pages["substrate_shell.part2"]
    assert "page 2 of" in page.get_suptitle()
    style.save(page, [tmp_path / "rates.png", tmp_path / "rates.svg"])
    assert (tmp_path / "rates.png").stat().st_size > 5000


def test_posterior_rates_of_a_few_rates_is_one_page():
    pair, pooled, per_tree, summary = posterior_tables(n_trees=4)
    few = dict([(k, v) for k, v in pooled.items() if k[0] == "independent"][:5])
    pages = plots_bayes.posterior_rate_pages(few, per_tree, summary, ["independent"], "pair")
    assert list(pages) == ["pair"]
    fig = pages["pair"]
    assert size_problems(fig) == [] and overlaps(fig) == []
    assert "page" not in fig.get_suptitle()


def model_tables(n_analyses: int, n_trees: int = 10, seed: int = 4):
    rng = np.random.default_rng(seed)
    marginal, support, models = [], [], {}
    for a in range(n_analyses):
        name = f"trait_{a + 1:02d}"
        models[name] = HYPOTHESES if a % 2 else ["one_rate", "mirrored", "free"]
        p = rng.dirichlet(np.ones(len(models[name])), size=n_trees)
        for i, m in enumerate(models[name]):
            marginal += [
                dict(analysis=name, model=m, tree=t, posterior_probability=p[t, i])
                for t in range(n_trees)
            ]
            support.append(
                dict(
                    analysis=name,
                    model=m,
                    n_trees=n_trees,
                    mean_probability=p[:, i].mean(),
                    trait_weighted_probability=p[:, i].mean() * 0.9,
                )
            )
    return pd.DataFrame(marginal), pd.DataFrame(support), models


@pytest.mark.parametrize("n_analyses", [1, 4, 14])
def test_model_probabilities_fit_pages(n_analyses, tmp_path):
    marginal, support, models = model_tables(n_analyses)
    pages = plots_bayes.model_probability_pages(marginal, support, models)
    shown = []
    for name, fig in pages.items():
        assert size_problems(fig) == [] and overlaps(fig) == [], name
        shown += [ax.get_title(loc="left").split(" (")[0] for ax in fig.axes if ax.get_visible()]
    assert shown == list(models)  # every analysis once, in order
    assert list(pages)[0] == "model_probabilities"
    if n_analyses > 4:
        assert "model_probabilities.part2" in pages
        assert "page 1 of" in pages["model_probabilities"].get_suptitle()
    style.save(pages["model_probabilities"], [tmp_path / "m.png", tmp_path / "m.svg"])


def test_posterior_rates_without_draws_says_so():
    pair, pooled, per_tree, summary = posterior_tables(n_trees=2)
    pages = plots_bayes.posterior_rate_pages({}, per_tree, summary, HYPOTHESES, "empty")
    fig = pages["empty"]
    assert [t.get_text() for t in fig.axes[0].texts] == ["empty: no posterior draws saved"]
    assert size_problems(fig) == []
