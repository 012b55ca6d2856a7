"""End-to-end: real Snakemake runs of the whole workflow on a tiny generated data set."""

from __future__ import annotations

import shutil

import numpy as np
import pandas as pd
import pytest
import yaml
from workflow_helpers import run_snakemake, tiny_config

from mkforest.engine.compare import akaike_weights, information_criteria

FIT_CONTRACT = [
    "analysis",
    "model",
    "tree",
    "n_taxa",
    "n_params",
    "log_likelihood",
    "aic",
    "aicc",
    "bic",
    "converged",
]
RATE_CONTRACT = ["analysis", "model", "tree", "from_state", "to_state", "rate"]
SUPPORT_CONTRACT = [
    "analysis",
    "model",
    "mean_weight",
    "median_weight",
    "fraction_best",
    "median_criterion_difference",
    "criterion_difference_low95",
    "criterion_difference_high95",
]


@pytest.fixture(scope="module")
def finished_run(tmp_path_factory):
    work = tmp_path_factory.mktemp("run")
    cfg = tiny_config(work)
    proc = run_snakemake(work, cfg)
    assert proc.returncode == 0, proc.stderr[-3000:]
    return work, cfg


def tables(work):
    out = work / "results" / "tiny" / "tables"
    return {
        name: pd.read_csv(out / f"{name}.tsv", sep="\t")
        for name in ("fits", "rates", "model_support", "trees_used")
    }


def test_result_contract(finished_run):
    work, _ = finished_run
    t = tables(work)
    fits, rates, support, used = t["fits"], t["rates"], t["model_support"], t["trees_used"]
    for col in FIT_CONTRACT:
        assert col in fits.columns
    for col in RATE_CONTRACT:
        assert col in rates.columns
    for col in SUPPORT_CONTRACT:
        assert col in support.columns
    # burn-in of 1 tree out of 6: trees 1..5 (0-based positions in the file)
    assert used["tree"].tolist() == [1, 2, 3, 4, 5]
    assert len(fits) == 5 * 2 * 2  # trees x traits x models
    assert sorted(fits["tree"].unique()) == [1, 2, 3, 4, 5]
    # states appear by their labels, never by index
    assert set(rates.loc[rates["analysis"] == "glow", "from_state"]) <= {"dull", "glowing"}


def test_criteria_and_weights_follow_their_formulas(finished_run):
    """AIC/AICc/BIC and Akaike weights recomputed from ln L, k and n (Akaike 1974;
    Hurvich & Tsai 1989; Schwarz 1978; Burnham & Anderson 2002)."""
    work, _ = finished_run
    fits = tables(work)["fits"]
    for row in fits.to_dict("records"):
        ic = information_criteria(row["log_likelihood"], row["n_params"], row["n_taxa"])
        assert row["aic"] == pytest.approx(
            2 * row["n_params"] - 2 * row["log_likelihood"], abs=1e-6
        )
        assert row["aicc"] == pytest.approx(ic["aicc"], abs=1e-6)
        assert row["bic"] == pytest.approx(ic["bic"], abs=1e-6)
    for _, g in fits.groupby(["analysis", "tree"]):
        aicc = g["aicc"].to_numpy()
        expected = np.exp(-(aicc - aicc.min()) / 2)
        np.testing.assert_allclose(g["weight"].to_numpy(), expected / expected.sum(), atol=1e-8)
        np.testing.assert_allclose(g["weight"], akaike_weights(aicc), atol=1e-12)


def test_support_summarises_the_fits(finished_run):
    work, _ = finished_run
    t = tables(work)
    fits, support = t["fits"], t["model_support"]
    for row in support.to_dict("records"):
        g = fits[(fits["analysis"] == row["analysis"]) & (fits["model"] == row["model"])]
        assert row["mean_weight"] == pytest.approx(g["weight"].mean())
        assert row["median_weight"] == pytest.approx(g["weight"].median())
        assert row["fraction_best"] == pytest.approx((g["criterion_difference"] < 1e-9).mean())
        assert row["median_criterion_difference"] == pytest.approx(
            g["criterion_difference"].median()
        )
        # five trees: the output says the intervals are rough
        assert "only 5 trees" in row["caution"]


def test_plots_written_and_labelled(finished_run):
    work, _ = finished_run
    plots = work / "results" / "tiny" / "plots"
    pages = [f"rates_across_trees/{a}" for a in ("glow", "habitat")]  # one per analysis
    assert sorted(p.name for p in (plots / "rates_across_trees").glob("[!.]*")) == sorted(
        f"{a}.{ext}" for a in ("glow", "habitat") for ext in ("png", "svg")
    )
    for name in ("support_weights", "support_heatmap", *pages):
        png = (plots / f"{name}.png").read_bytes()
        assert png[:8] == b"\x89PNG\r\n\x1a\n" and len(png) > 5000
        svg = (plots / f"{name}.svg").read_text()
        assert "<svg" in svg
    # one tree set and every model on the given lengths: no treatment figure to draw
    assert not list(plots.glob("support_branches.*"))
    svg = (plots / "support_weights.svg").read_text()
    # SVG text is stored as glyph paths; the labels appear in the id/comments matplotlib writes
    assert "glow" in svg and "habitat" in svg


def test_same_result_whatever_the_chunking_and_cores(finished_run, tmp_path):
    """per_job 1 vs 2 and 1 core vs 2 give identical tables (seeds derive from the
    tree index, analysis and model, never from job order)."""
    work, _ = finished_run
    reference = (work / "results" / "tiny" / "tables" / "fits.tsv").read_text()
    shutil.copytree(work / "data", tmp_path / "data")
    cfg = tiny_config(
        tmp_path, trees={"file": str(tmp_path / "data" / "trees.nex"), "burnin": 1, "per_job": 1}
    )
    proc = run_snakemake(tmp_path, cfg, cores=1)
    assert proc.returncode == 0, proc.stderr[-3000:]
    again = (tmp_path / "results" / "tiny" / "tables" / "fits.tsv").read_text()
    strip = lambda text: text.replace(str(tmp_path), "").replace(str(work), "")  # noqa: E731
    assert strip(again) == strip(reference)


def test_rerun_does_nothing_and_new_model_reruns_only_its_jobs(finished_run):
    work, cfg = finished_run
    proc = run_snakemake(work, cfg, "--dry-run", "--quiet", "rules")
    assert proc.returncode == 0, proc.stderr[-2000:]
    assert "fit " not in proc.stdout and "Nothing to be done" in (proc.stdout + proc.stderr)
    config = yaml.safe_load(cfg.read_text())
    config["models"]["mirrored"] = {"kind": "symmetric"}
    cfg2 = cfg.with_name("config_more.yaml")
    cfg2.write_text(yaml.safe_dump(config))
    proc = run_snakemake(work, cfg2, "--dry-run", "--printshellcmds")
    text = proc.stdout + proc.stderr
    assert proc.returncode == 0, text[-2000:]
    fit_jobs = [line for line in text.splitlines() if "fits/" in line and "output:" in line]
    assert fit_jobs, text[-2000:]
    assert all("/mirrored/" in line for line in fit_jobs)
    assert "rule aggregate_fits" in text
    assert "rule prepare_trees" not in text


def test_finished_results_survive_a_bad_edit(finished_run, tmp_path):
    """A mistake added to a finished run's config fails with a message naming it,
    and nothing already computed is touched."""
    work, cfg = finished_run
    fits = work / "results" / "tiny" / "tables" / "fits.tsv"
    before = fits.read_text()
    config = yaml.safe_load(cfg.read_text())
    config["models"]["bad"] = {
        "kind": "custom",
        "applies_to": ["glow"],
        "transitions": {"dull -> nowhere": "x"},
    }
    cfg2 = tmp_path / "bad.yaml"
    cfg2.write_text(yaml.safe_dump(config))
    proc = run_snakemake(work, cfg2)
    assert proc.returncode != 0
    assert "nowhere" in proc.stderr + proc.stdout
    assert fits.read_text() == before
