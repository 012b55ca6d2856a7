"""The Bayesian stage's tables, draws files and figures, built from a stand-in sampler.

The stand-in (this file only; the workflow test runs the real engine) returns draws
of known lognormal shape and marginal likelihoods chosen here, so every number in
the tables can be worked out independently: model probabilities are
exp(l_M) / sum exp(l_M') (Kass & Raftery 1995), tree weights exp(l_t) / sum exp(l_s),
the pooled median is NumPy's median of the draws read back with ArviZ (a
general-purpose library) from the netCDF file.
"""

from __future__ import annotations

import math
from types import SimpleNamespace

import arviz as az
import numpy as np
import pandas as pd
import pytest
from figure_checks import overlaps

from mkforest.data.traits import Trait, with_written_names
from mkforest.data.trees import parse_newick
from mkforest.engine.models import build_model
from mkforest.jobs import bayes
from mkforest.report import plots_bayes, style


def header(columns) -> list:
    """A table's header: the stage's columns, each trait-name column followed by its
    ``_as_written`` column (data.traits.with_written_names)."""
    return list(with_written_names(pd.DataFrame(columns=columns), {}).columns)


TREES = [
    "((a:1,b:1):1,(c:0.5,(d:0.2,e:0.2):0.3):1.5);",
    "((a:1,b:1,c:1):1,(d:1,e:1):1);",  # a polytomy
    "((a:0,b:1):2,(c:1,(d:1,e:1):1):1);",  # a zero-length branch
    "(((a:1,b:1):1,c:2):1,(d:2,e:2):1);",
]
# log marginal likelihood of (model, tree): chosen so that the answers are round numbers
LOG_ML = {
    ("one", 0): math.log(1.0),
    ("one", 1): math.log(3.0),
    ("one", 2): math.log(2.0),
    ("one", 3): math.log(6.0),
    ("two", 0): math.log(3.0),
    ("two", 1): math.log(1.0),
    ("two", 2): math.log(2.0),
    ("two", 3): math.log(2.0),
}


def trees():
    out = []
    for i, t in enumerate(TREES):
        tree = parse_newick(t, index=10 + i, rooted=True)
        out.append(tree.with_tree_set("dated"))
    return out


def trait(missing=True):
    taxa = ("a", "b", "c", "d", "e")
    cells = [(1, 0), (1, 0), (0, 1), (0, 1), (1, 1) if missing else (0, 1)]
    return Trait("glow", ("dull", "bright"), taxa, np.array(cells, bool))


def stand_in(tree, X, model, *, root, branches, prior, chains, warmup, draws, seed):
    """Known posterior: log-rates normal around ln(0.5 + p), sd 0.3; flagged on tree 12."""
    rng = np.random.default_rng(seed)
    p = model.n_params
    x = np.exp(rng.normal(np.log(0.5 + np.arange(p)), 0.3, size=(chains, draws, p)))
    flagged = tree.index == 12
    return SimpleNamespace(
        labels=tuple(model.labels),
        draws=x,
        log_likelihood=rng.normal(-5, 1, size=(chains, draws)),
        ess_bulk=np.full(p, 350.0 if flagged else 900.0),
        ess_tail=np.full(p, 800.0),
        r_hat=np.full(p, 1.002),
        flagged=flagged,
        log_marginal_likelihood=LOG_ML[(model.name, tree.index - 10)],
        mc_error=0.01,
        method="stand-in",
        notes=[],
    )


SETTINGS = {"chains": 2, "warmup": 10, "draws": 300, "saved_draws": 100, "prior": {}}


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    """Two models of one trait, sampled in two chunks, then the summary job's function."""
    out = tmp_path_factory.mktemp("bayes")
    t = trait()
    models = {
        "one": build_model("equal", t.states, None, "one"),
        "two": build_model("unconstrained", t.states, None, "two"),
    }
    files = {"rates": [], "ml": [], "draws": []}
    for name, model in models.items():
        for c, chunk in enumerate((trees()[:2], trees()[2:])):
            rates, mls, kept = bayes.bayes_chunk(
                chunk, t, model, "uniform", "glow", 7, SETTINGS, sample=stand_in
            )
            folder = out / "bayes" / "glow" / name
            folder.mkdir(parents=True, exist_ok=True)
            for kind, rows, cols in (
                ("rates", rates, bayes.POSTERIOR_COLUMNS),
                ("ml", mls, bayes.ML_COLUMNS),
            ):
                path = folder / f"chunk_{c}.{kind}.tsv"
                pd.DataFrame(rows, columns=cols).to_csv(path, sep="\t", index=False)
                files[kind].append(str(path))
            path = folder / f"chunk_{c}.draws.npz"
            np.savez_compressed(path, **kept)
            files["draws"].append(str(path))
    target = SimpleNamespace(
        posterior_rates=out / "posterior_rates.tsv",
        summary=out / "posterior_summary.tsv",
        marginal=out / "marginal_likelihoods.tsv",
        support=out / "bayes_model_support.tsv",
        draws=[out / "glow.nc"],
    )
    bayes.write_summary(
        files["rates"], files["ml"], files["draws"], {"glow": ["one", "two"]}, [], SETTINGS, target
    )
    return target


def test_columns(run):
    assert list(bayes.read_table(run.posterior_rates)) == header(bayes.POSTERIOR_COLUMNS)
    assert list(bayes.read_table(run.summary)) == header(bayes.SUMMARY_COLUMNS)
    assert list(bayes.read_table(run.marginal)) == header(bayes.ML_TABLE_COLUMNS)
    assert list(bayes.read_table(run.support)) == header(bayes.SUPPORT_COLUMNS)


def test_rates_keyed_like_rates_tsv(run):
    rates = bayes.read_table(run.posterior_rates)
    two = rates[(rates["model"] == "two") & (rates["tree"] == 10)]
    assert sorted(zip(two["from_state"], two["to_state"])) == [
        ("bright", "dull"),
        ("dull", "bright"),
    ]
    one = rates[(rates["model"] == "one") & (rates["tree"] == 10)]
    assert set(one["parameter"]) == {"rate"} and len(one) == 2  # one rate, both changes
    # ESS 350 on tree 12 flags every parameter there, and only there
    assert set(rates.loc[rates["flag"] != "", "tree"]) == {12}


def test_posterior_probabilities(run):
    ml = bayes.read_table(run.marginal)
    sums = ml.groupby(["tree_set", "analysis", "tree"])["posterior_probability"].sum()
    assert np.allclose(sums, 1.0, atol=1e-12)
    # tree 10: p(D|one) = 1, p(D|two) = 3 -> 1/4, 3/4
    row = ml[(ml["tree"] == 10)].set_index("model")["posterior_probability"]
    assert row["one"] == pytest.approx(0.25) and row["two"] == pytest.approx(0.75)


def test_model_support_by_hand(run):
    sup = bayes.read_table(run.support).set_index("model")
    # per tree P(one) = 1/4, 3/4, 1/2, 3/4 -> mean 9/16; most probable on trees 11 and 13
    # (tree 12 ties: argmax takes the first, 'one')
    assert sup.loc["one", "mean_probability"] == pytest.approx(9 / 16)
    assert sup.loc["one", "share_most_probable"] == pytest.approx(3 / 4)
    # across trees: sum p(D|T,one) = 12, sum p(D|T,two) = 8 -> 12/20
    assert sup.loc["one", "trait_weighted_probability"] == pytest.approx(12 / 20)
    # joint tree weights 4, 4, 4, 8 (of 20): 1 / sum w^2
    assert sup.loc["one", "effective_trees"] == pytest.approx(1 / (3 * 0.2**2 + 0.4**2))
    assert sup.loc["one", "n_flagged"] == 1


def test_pooled_summary_equals_the_draws_file(run):
    data = az.from_netcdf(run.draws[0])
    summary = bayes.read_table(run.summary)
    for model, label in (("one", "rate"), ("two", "bright->dull")):
        var = data.posterior[f"{model}:{label}"]
        assert var.dims == ("chain", "draw", "tree")
        assert var.shape == (2, 50, 4)  # saved_draws 100 over 2 chains, 4 trees
        assert list(var["tree"].values) == [10, 11, 12, 13]
        row = summary[
            (summary["model"] == model)
            & (summary["parameter"] == label)
            & (summary["summary"] == bayes.AS_GIVEN)
        ].iloc[0]
        values = var.values.ravel()
        assert row["median"] == pytest.approx(np.median(values), rel=1e-12)
        assert row["low95"] == pytest.approx(np.quantile(values, 0.025), rel=1e-12)
        assert row["n_trees"] == 4 and row["n_flagged"] == 1
        # trait weighted: tree t's 100 draws share w_t = p(D|T_t) / sum
        ml = np.array([LOG_ML[(model, t)] for t in range(4)])
        w = np.exp(ml) / np.exp(ml).sum()
        v = var.values  # [chain, draw, tree]
        vals = np.concatenate([v[:, :, t].ravel() for t in range(4)])
        wts = np.concatenate([np.full(100, w[t] / 100) for t in range(4)])
        order = np.argsort(vals)
        cum = np.cumsum(wts[order])
        by_hand = vals[order][np.searchsorted(cum, 0.5 - 1e-12)]
        weighted = summary[
            (summary["model"] == model)
            & (summary["parameter"] == label)
            & (summary["summary"] == bayes.TRAIT_WEIGHTED)
        ].iloc[0]
        assert weighted["median"] == by_hand
        assert weighted["effective_trees"] == pytest.approx(1 / np.sum(w**2))


def test_per_tree_summary_uses_every_draw(run):
    rates = bayes.read_table(run.posterior_rates)
    # the stand-in's log-rates are normal(ln 0.5, 0.3) for parameter 0: median near 0.5
    one = rates[rates["model"] == "one"]
    assert np.all(np.abs(np.log(one["median"] / 0.5)) < 0.1)
    assert np.all(one["low95"] < one["median"]) and np.all(one["median"] < one["high95"])


def test_figures_have_no_overlaps(run, tmp_path):
    rates = bayes.read_table(run.posterior_rates)
    summary = bayes.read_table(run.summary)
    fig = plots_bayes.posterior_rates(
        bayes.pooled_from_file(run.draws[0]), rates, summary, ["one", "two"], "glow"
    )
    assert overlaps(fig) == []
    style.save(fig, [tmp_path / "rates.png", tmp_path / "rates.svg"])
    fig = plots_bayes.model_probabilities(
        bayes.read_table(run.marginal), bayes.read_table(run.support), {"glow": ["one", "two"]}
    )
    assert overlaps(fig) == []
    style.save(fig, [tmp_path / "models.png", tmp_path / "models.svg"])
    assert (tmp_path / "models.png").stat().st_size > 5000


def test_methods_sentences_from_the_tables(run):
    from mkforest.report.methods_bayes import bayes_paragraph, bayes_results

    tables = {
        "marginal_likelihoods": bayes.read_table(run.marginal),
        "bayes_model_support": bayes.read_table(run.support),
    }
    config = {
        "bayes": {
            "enabled": True,
            "prior": {"log_uniform": {"lower": 0.01, "upper": 100}},
            "chains": 2,
            "warmup": 10,
            "draws": 300,
            "saved_draws": 100,
        }
    }
    text = bayes_paragraph(config, tables)
    assert "a log-uniform prior from 0.01 to 100 on its number of expected changes" in text
    # tree 12 flagged under both models: 2 of 8 posteriors
    assert "2 of 8 posteriors (tree by model) had an R-hat above 1.01" in text
    assert "depend on the prior" in text
    # joint weights 0.2, 0.2, 0.2, 0.4: 3.57 effective trees of 4, not 'a few'
    assert "a few trees carry the weight" not in text
    one_tree = tables["bayes_model_support"].assign(effective_trees=1.2)
    text = bayes_paragraph(config, dict(tables, bayes_model_support=one_tree))
    assert "a few trees carry the weight for glow (about 1.20 of 4 trees)" in text
    words = bayes_results("glow", tables)
    assert "one had the highest mean posterior probability over 4 trees (0.56;" in words
    assert "most probable on 3 of 4 trees; 0.60 with the trees weighted by the trait" in words
