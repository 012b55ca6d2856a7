"""End-to-end: real Snakemake runs of the ancestral-state stage on a tiny generated data set.

Checks against facts of the trade: state probabilities at a node sum to one;
the time spent in all states along a map is the tree's total branch length, so
the mean time summed over states equals the mean tree length (read from
trees_used.tsv); maps are seeded per tree, so results do not depend on how the
trees are split into jobs.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from workflow_helpers import run_snakemake, tiny_config

pytestmark = pytest.mark.slow  # two real workflow runs, ~1-2 minutes


def taxa_of(work):
    return pd.read_csv(work / "data" / "traits.tsv", sep="\t")["taxon"].tolist()


def ancestral_config(work, per_job=2, clades=None):
    tiny_config(work)  # writes the data
    taxa = sorted(taxa_of(work))
    clades = (
        clades
        if clades is not None
        else {"first_pair": taxa[:2], "wide": {"mrca_of": [taxa[0], taxa[-1]]}}
    )
    return tiny_config(
        work,
        ancestral={"enabled": True, "model": "average", "maps": 20, "clades": clades},
        trees={"file": str(work / "data" / "trees.nex"), "burnin": 1, "per_job": per_job},
    )


@pytest.fixture(scope="module")
def ancestral_run(tmp_path_factory):
    work = tmp_path_factory.mktemp("anc")
    cfg = ancestral_config(work)
    proc = run_snakemake(work, cfg, "ancestral")
    assert proc.returncode == 0, proc.stderr[-3000:]
    return work


def read(work, name):
    return pd.read_csv(work / "results" / "tiny" / "tables" / f"{name}.tsv", sep="\t")


def test_tables_and_plots(ancestral_run):
    work = ancestral_run
    states = read(work, "ancestral_states")
    clades = read(work, "clades")
    used = read(work, "trees_used")
    assert set(states["analysis"]) == {"glow", "habitat"}
    # every clade x state once per analysis; probabilities of a clade sum to one (fact)
    per = states.groupby(["analysis", "clade"])
    assert (per.size() == per["state"].nunique()).all()
    sums = per["mean_probability"].sum()
    np.testing.assert_allclose(sums.to_numpy(), 1.0, atol=1e-6)
    assert {"first_pair", "wide"} <= set(clades["clade"])
    assert "root" in set(clades["clade"])
    assert (states["n_trees"] <= len(used)).all()
    assert (states["probability_low95"] <= states["mean_probability"] + 1e-12).all()
    assert (states["mean_probability"] <= states["probability_high95"] + 1e-12).all()
    wide = states[states["clade"] == "wide"]
    assert (wide["n_trees"] == len(used)).all()  # an MRCA exists in every tree

    trans = read(work, "transitions")
    for a, g in trans.groupby("analysis"):
        k = states[states["analysis"] == a]["state"].nunique()
        assert len(g) == k * (k - 1)
        # maps under fits with a rate the data do not bound from above are counted apart
        assert (g["n_maps"] + g["n_maps_at_upper"] == 20 * len(used)).all()
    times = read(work, "state_times")
    for _a, g in times.groupby("analysis"):
        # each map's times in state add up to its tree's length
        total = g["mean_time"].sum()
        if (g["n_maps_at_upper"] == 0).all():
            np.testing.assert_allclose(total, used["total_length"].mean(), rtol=1e-4)
        elif (g["n_maps"] == 0).all():
            # every map was drawn under a bound-limited fit: no time is reported, not zeros
            assert g["mean_time"].isna().all() and g["caution"].str.contains("left out").all()
        else:
            assert used["total_length"].min() - 1e-9 <= total <= used["total_length"].max() + 1e-9

    plots = work / "results" / "tiny" / "plots"
    for name in [
        "changes/changes.png",
        "changes/changes.svg",
        "ancestral_trees/glow.png",
        "ancestral_trees/habitat.svg",
    ]:
        assert (plots / name).stat().st_size > 1000, name
    assert not (plots / "class_trees").exists()  # no model has hidden classes: no folder


def test_same_maps_whatever_the_chunking(ancestral_run, tmp_path):
    """Seeds come from (seed, tree, analysis), so one job per tree or three trees per job
    give identical per-tree results (fact of the trade for derived seeds)."""
    other = tmp_path / "other"
    other.mkdir()
    cfg = ancestral_config(other, per_job=3)
    proc = run_snakemake(other, cfg, "ancestral", cores=1)
    assert proc.returncode == 0, proc.stderr[-3000:]
    a = read(ancestral_run, "transitions_per_tree").sort_values(
        ["analysis", "tree", "from_state", "to_state"]
    )
    b = read(other, "transitions_per_tree").sort_values(
        ["analysis", "tree", "from_state", "to_state"]
    )
    pd.testing.assert_frame_equal(a.reset_index(drop=True), b.reset_index(drop=True))
    sa = read(ancestral_run, "ancestral_states")
    sb = read(other, "ancestral_states")
    pd.testing.assert_frame_equal(sa, sb)


def test_unknown_taxon_in_named_clade_is_a_clear_error(tmp_path):
    cfg = ancestral_config(tmp_path, clades={"mine": ["Nobody_here", "Nor_this"]})
    proc = run_snakemake(tmp_path, cfg, "ancestral")
    assert proc.returncode != 0
    log = (tmp_path / "results" / "tiny" / "logs" / "ancestral_clades.log").read_text()
    assert "ancestral.clades.mine" in log and "'Nobody_here'" in log
    assert "Traceback" not in log
