"""Bayesian estimation end to end: a real Snakemake run with the real sampler on an
invented sample that is not the demo: unrooted trees (midpoint-rooted by the run) with
polytomies and a starting tree dropped as burn-in, a trait table with missing cells,
two traits, a trait pair. The tables must agree with one another and with the draws
file (read back with ArviZ, a general-purpose library): posterior probabilities sum
to 1 per tree (Bayes' rule with equal prior model probabilities), the pooled median is
NumPy's median of the saved draws, 2 ln B is twice the difference of log marginal
likelihoods (Kass & Raftery 1995), the trait-weighted model probability is
sum_t exp(l_tM) / sum_tM' exp(l_tM').
"""

from __future__ import annotations

import arviz as az
import numpy as np
import pandas as pd
import pytest
import yaml
from catalogue_inputs import TAXA, posterior_nexus, unresolved_sample, unrooted
from workflow_helpers import run_snakemake

from mkforest.data.traits import with_written_names
from mkforest.jobs import bayes


def header(columns) -> list:
    """A table's header: the stage's columns, each trait-name column followed by its
    ``_as_written`` column (data.traits.with_written_names)."""
    return list(with_written_names(pd.DataFrame(columns=columns), {}).columns)


pytestmark = pytest.mark.filterwarnings("ignore")


def write_inputs(folder):
    rng = np.random.default_rng(23)
    newicks = unresolved_sample(n_trees=6, n_tips=8, seed=5, p_polytomy=0.25)
    posterior_nexus(folder / "trees.nex", [unrooted(n) for n in newicks], TAXA, rooted="[&U] ")
    rows = ["taxon\tspines\tcolour"]
    for i, taxon in enumerate(TAXA):
        spines = "?" if i in (2, 6) else ("long" if rng.random() < 0.5 else "short")
        colour = "NA" if i == 4 else ("ochre" if i % 2 else "slate")
        rows.append(f"{taxon}\t{spines}\t{colour}")
    rows[1] = rows[1].replace("\t?\t", "\tlong\t")
    (folder / "traits.tsv").write_text("\n".join(rows) + "\n")


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    work = tmp_path_factory.mktemp("bayes_e2e")
    write_inputs(work)
    config = {
        "run": "bayes",
        "seed": 5,
        "trees": {"file": str(work / "trees.nex"), "burnin": 1, "root": "midpoint", "per_job": 3},
        "traits": {
            "file": str(work / "traits.tsv"),
            "taxon_column": "taxon",
            "columns": ["spines", "colour"],
        },
        "models": {"same": {"kind": "equal"}, "own": {"kind": "unconstrained"}},
        "pairs": {"body": {"traits": ["spines", "colour"]}},
        "ancestral": {"enabled": False},
        "bayes": {
            "enabled": True,
            "models": ["same", "independent", "dependent"],
            "trees": 3,
            "chains": 2,
            "warmup": 100,
            "draws": 100,
            "saved_draws": 60,
            "prior": {"gamma": {"shape": 2, "mean": 1}},
        },
    }
    path = work / "config.yaml"
    path.write_text(yaml.safe_dump(config, sort_keys=False))
    res = run_snakemake(work, path, timeout=900)
    assert res.returncode == 0, res.stderr[-4000:]
    report = run_snakemake(work, path, "--report", str(work / "report.html"), timeout=600)
    assert report.returncode == 0, report.stderr[-4000:]
    return work / "results" / "bayes", res


def table(out, name):
    return bayes.read_table(out / "tables" / f"{name}.tsv")


def test_tables_and_columns(run):
    out, _ = run
    assert list(table(out, "posterior_rates")) == header(bayes.POSTERIOR_COLUMNS)
    assert list(table(out, "posterior_summary")) == header(bayes.SUMMARY_COLUMNS)
    assert list(table(out, "marginal_likelihoods")) == header(bayes.ML_TABLE_COLUMNS)
    assert list(table(out, "bayes_model_support")) == header(bayes.SUPPORT_COLUMNS)
    ml = table(out, "marginal_likelihoods")
    # 3 of the 5 trees left after burn-in, spread evenly: positions 0, 2, 4 -> trees 1, 3, 5
    assert sorted(set(ml["tree"])) == [1, 3, 5]
    assert set(ml["analysis"]) == {"spines", "colour", "body"}
    assert set(ml["model"]) == {"same", "independent", "dependent"}  # bayes.models
    assert np.isfinite(ml["log_marginal_likelihood"]).all()
    assert (ml["mc_error"] >= 0).all() and (ml["method"] != "").all()


def test_probabilities_sum_to_one_and_bayes_factors_agree(run):
    out, _ = run
    ml = table(out, "marginal_likelihoods")
    sums = ml.groupby(["tree_set", "analysis", "tree"])["posterior_probability"].sum()
    assert np.allclose(sums, 1.0, atol=1e-12)
    body = ml[ml["analysis"] == "body"].pivot(index="tree", columns="model")
    lml = body["log_marginal_likelihood"]
    bf = body["two_log_bf"]["dependent"]
    assert np.allclose(bf, 2 * (lml["dependent"] - lml["independent"]), rtol=0, atol=1e-9)
    sup = table(out, "bayes_model_support").set_index(["analysis", "model"])
    assert sup.loc[("body", "dependent"), "versus"] == "independent"
    assert sup.loc[("body", "dependent"), "two_log_bf_median"] == pytest.approx(np.median(bf))
    # trait-weighted model probability: sum_t exp(l) / sum over models and trees
    x = np.exp(lml.to_numpy())
    by_hand = x.sum(axis=0) / x.sum()
    got = [sup.loc[("body", m), "trait_weighted_probability"] for m in lml.columns]
    assert got == pytest.approx(list(by_hand), rel=1e-9)


def test_pooled_median_equals_the_draws_file(run):
    out, _ = run
    summary = table(out, "posterior_summary")
    data = az.from_netcdf(out / "posterior" / "spines.nc")
    assert list(data.posterior["tree"].values) == [1, 3, 5]
    for name, var in data.posterior.data_vars.items():
        model, parameter = name.split(":", 1)
        assert var.shape == (2, 30, 3)  # 60 saved draws over 2 chains, 3 trees
        row = summary[
            (summary["analysis"] == "spines")
            & (summary["model"] == model)
            & (summary["parameter"] == parameter)
            & (summary["summary"] == bayes.AS_GIVEN)
        ].iloc[0]
        assert row["median"] == pytest.approx(np.median(var.values), rel=1e-12)
        assert row["high95"] == pytest.approx(np.quantile(var.values, 0.975), rel=1e-12)
    ml = table(out, "marginal_likelihoods")
    w = np.exp(
        ml[(ml["analysis"] == "spines") & (ml["model"] == "same")]["log_marginal_likelihood"]
    )
    weighted = summary[
        (summary["analysis"] == "spines")
        & (summary["model"] == "same")
        & (summary["summary"] == bayes.TRAIT_WEIGHTED)
    ]
    assert weighted["effective_trees"].iloc[0] == pytest.approx(1 / np.sum((w / w.sum()) ** 2))


def test_per_tree_rows_and_flags(run):
    out, _ = run
    rates = table(out, "posterior_rates")
    ml = table(out, "marginal_likelihoods")
    own = rates[(rates["analysis"] == "spines") & (rates["model"] == "same")]
    assert len(own) == 2 * 3  # one rate, two changes, three trees
    assert (own["low95"] <= own["median"]).all() and (own["median"] <= own["high95"]).all()
    flagged_fit = set(
        ml.loc[ml["flagged"].astype(str) == "True", ["analysis", "model", "tree"]].itertuples(
            index=False, name=None
        )
    )
    flagged_rows = set(
        rates.loc[rates["flag"] != "", ["analysis", "model", "tree"]].itertuples(
            index=False, name=None
        )
    )
    assert flagged_rows <= flagged_fit


def test_figures_methods_and_job_count(run):
    out, res = run
    # the HTML report carries the tables and figures, with their captions
    html = (out.parent.parent / "report.html").read_text(errors="replace")
    for name in ("posterior_summary.tsv", "bayes_model_support.tsv", "model_probabilities.png"):
        assert name in html
    # a folder per kind of figure, one figure per analysis, drawn by one job
    for name in (
        "posterior_rates/spines",
        "posterior_rates/body",
        "model_probabilities/model_probabilities",
    ):
        assert (out / "plots" / "bayes" / f"{name}.png").stat().st_size > 5000
    assert len(list((out / "logs" / "bayes").glob("plot*.log"))) == 1
    # 2 chains x 100 draws cannot reach an ESS of 400: every posterior is flagged, and
    # the run's last words say so
    assert "12 of 12 Bayesian posteriors are flagged" in res.stderr
    methods = (out / "methods.md").read_text()
    assert "12 of 12 posteriors (tree by model) had an R-hat above 1.01" in methods
    assert "Bayesian" in methods and "changes along the tree's root-to-tip height" in methods
    # sampling jobs: analyses x models x chunks holding a chosen tree (per_job 3: trees
    # 1, 3 in chunk 0 and 5 in chunk 1), not one per tree (4 x 3 = 12)
    jobs = list((out / "logs" / "bayes").rglob("chunk_*.log"))
    assert len(jobs) == 4 * 2
