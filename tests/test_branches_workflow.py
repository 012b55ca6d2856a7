"""End-to-end: branch-length treatments and two tree sets through a real Snakemake run.

The second tree set holds the same trees as the first with lengths in another unit
and per-branch clock noise (mkforest.demo writes it); the traits were simulated on
the first. Checked here: every analysis x model on every set, the new columns and
tables, the likelihood-ratio statistic recomputed from fits.tsv (2 (lnL1 - lnL0);
chi-square survival from scipy.stats, a general-purpose reference library), the
support plot rendered, and a tree set with other taxa stopped with a named error.
Ancestral states, stochastic maps and a trait pair's tests run on both sets: their
tables carry tree_set, each set's statistics come from its own fits, and the job
count follows the chunks, not the trees.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import scipy.stats
from workflow_helpers import run_snakemake, tiny_config

from mkforest.engine.branch_support import fraction_higher, lrt_p_value

PAIR = {
    "traits": ["glow", "banding"],
    "hypotheses": ["independent", "dependent"],
    "bootstrap": 3,
    "bootstrap_trees": 2,
}
MODELS = {
    "one_rate": {"kind": "equal"},
    "per_event": {"kind": "equal", "branches": "unit"},
    "stretched": {"kind": "equal", "branches": "kappa"},
    "flat_kappa": {"kind": "equal", "branches": {"kappa": 0}},
}


@pytest.fixture(scope="module")
def finished(tmp_path_factory):
    work = tmp_path_factory.mktemp("sets")
    cfg = tiny_config(
        work,
        models=MODELS,
        pairs={"lit": PAIR},
        ancestral={"enabled": True, "model": "average", "maps": 4},
    )
    import yaml

    config = yaml.safe_load(cfg.read_text())
    del config["trees"]
    data = work / "data"
    config["traits"]["columns"] = ["glow", "habitat", "banding"]
    config["tree_sets"] = {
        "dated": {"file": str(data / "trees.nex"), "burnin": 1, "per_job": 3},
        "molecular": {"file": str(data / "trees_molecular.nex"), "burnin": 1, "per_job": 3},
    }
    cfg.write_text(yaml.safe_dump(config, sort_keys=False))
    proc = run_snakemake(work, cfg)
    assert proc.returncode == 0, proc.stderr[-3000:]
    out = work / "results" / "tiny"
    read = {
        n: pd.read_csv(out / "tables" / f"{n}.tsv", sep="\t", keep_default_na=False, na_values=[""])
        for n in (
            "fits",
            "rates",
            "model_support",
            "treatment_support",
            "branch_tests",
            "branch_test_summary",
            "tree_set_support",
            "trees_used",
            "pair_tests",
            "pair_summary",
            "pair_bootstrap",
            "ancestral_states",
            "transitions",
            "state_times",
            "transitions_per_tree",
            "clades",
            "data_check",
        )
    }
    return work, out, read


def test_every_model_on_every_set(finished):
    _, _, t = finished
    fits = t["fits"]
    assert list(dict.fromkeys(fits["tree_set"])) == ["dated", "molecular"]
    # 5 trees x (3 traits x 4 models + the pair's 2 hypotheses) on each set
    assert fits.groupby("tree_set").size().to_dict() == {"dated": 70, "molecular": 70}
    assert set(t["trees_used"]["tree_set"]) == {"dated", "molecular"}
    assert set(t["rates"]["tree_set"]) == {"dated", "molecular"}
    assert set(t["model_support"]["tree_set"]) == {"dated", "molecular"}


def test_treatment_columns(finished):
    _, _, t = finished
    fits = t["fits"]
    by = fits.drop_duplicates("model").set_index("model")
    assert by.loc["one_rate", "branches"] == "as_given"
    assert by.loc["per_event", "branches"] == "unit"
    assert by.loc["stretched", "branches"] == "kappa"
    assert by.loc["flat_kappa", "branches"] == "kappa=0"
    k = fits.set_index("model")["n_params"]
    assert (k.loc["stretched"] == k.loc["one_rate"].iloc[0] + 1).all()
    assert (k.loc["flat_kappa"] == k.loc["one_rate"].iloc[0]).all()
    est = fits.loc[fits["model"] == "stretched", "branch_parameter"].astype(float)
    assert est.between(0.0, 3.0).all()
    assert fits.loc[fits["model"] == "one_rate", "branch_parameter"].isna().all()
    # kappa = 0 fixed is unit lengths (the demo trees have no zero-length branches)
    a = fits[fits["model"] == "flat_kappa"].set_index(["tree_set", "analysis", "tree"])
    b = fits[fits["model"] == "per_event"].set_index(["tree_set", "analysis", "tree"])
    assert np.allclose(a["log_likelihood"], b.loc[a.index, "log_likelihood"], atol=1e-6)
    support = t["model_support"].set_index(["tree_set", "analysis", "model"])
    med = support.loc[("dated", "glow", "stretched"), "branch_parameter_median"]
    want = fits.loc[
        (fits["tree_set"] == "dated")
        & (fits["analysis"] == "glow")
        & (fits["model"] == "stretched"),
        "branch_parameter",
    ].median()
    assert med == pytest.approx(want)


def test_likelihood_ratio_tests_recomputed(finished):
    _, _, t = finished
    fits, tests = t["fits"], t["branch_tests"]
    assert set(tests["alternative"]) == {"stretched"} and set(tests["null"]) == {"one_rate"}
    assert len(tests) == 2 * 3 * 5
    key = ["tree_set", "analysis", "tree"]
    alt = fits[fits["model"] == "stretched"].set_index(key)["log_likelihood"]
    null = fits[fits["model"] == "one_rate"].set_index(key)["log_likelihood"]
    for row in tests.to_dict("records"):
        k = (row["tree_set"], row["analysis"], row["tree"])
        # tables hold 10 significant digits
        stat = max(0.0, 2 * (alt.loc[k] - null.loc[k]))
        assert row["statistic"] == pytest.approx(stat, abs=1e-7)
        assert row["p_value"] == pytest.approx(scipy.stats.chi2.sf(row["statistic"], 1), rel=1e-8)
    # the treatment's weights sum to one per tree with the models
    ts = t["treatment_support"]
    for _, g in ts.groupby(["tree_set", "analysis"]):
        assert g["mean_weight"].sum() == pytest.approx(1.0)
        assert g["fraction_best"].sum() == pytest.approx(1.0)


def test_tree_set_support_statement(finished):
    _, _, t = finished
    s = t["tree_set_support"]
    fits = t["fits"]
    assert set(s["tree_set"]) == {"dated", "molecular"}
    best = s[s["model"] == "best_model"]
    assert set(best["analysis"]) == {"glow", "habitat", "banding", "lit"}
    compared = 0
    for row in s.to_dict("records"):
        ll = fits[
            (fits["tree_set"] == row["tree_set"])
            & (fits["analysis"] == row["analysis"])
            & (fits["model"] == row["model"])
        ]["log_likelihood"]
        if row["model"] != "best_model":
            assert row["median_log_likelihood"] == pytest.approx(ll.median())
        if pd.notna(row["compared_with"]):
            other = fits[
                (fits["tree_set"] == row["compared_with"])
                & (fits["analysis"] == row["analysis"])
                & (fits["model"] == row["model"])
            ]["log_likelihood"]
            if row["model"] != "best_model":
                assert row["fraction_better"] == pytest.approx(fraction_higher(other, ll))
            assert row["compared_with"] in row["statement"] and row["tree_set"] in row["statement"]
            compared += 1
    assert compared == len(s) // 2


def test_plot_and_methods(finished):
    _, out, _ = finished
    for ext in ("png", "svg"):
        assert (out / "plots" / f"support_branches.{ext}").stat().st_size > 5000
    text = (out / "methods.md").read_text()
    assert "not which trees are closer to the truth" in text
    assert "Pagel 1994" in text and "McGraw & Wong 1992" in text
    # no stray fragment; the second set in the paragraph and in every analysis's results
    assert "Tree set 'dated'. " not in text and "(tree set 'dated')" in text
    brief = text.split("## Methods in one paragraph", 1)[1].split("##", 1)[0]
    assert "tree set 'molecular' (5 trees)" in brief
    # four models with their words pass 250 words: names with their treatments
    assert '"stretched" (kappa estimated)' in brief and '"flat_kappa" (kappa 0)' in brief
    # glow, habitat, banding and the pair lit
    assert text.count("On tree set 'molecular' (5 trees)") == 4


def test_pair_tests_on_every_set(finished):
    """Each set's pair statistics from that set's own fits: 2 (lnL_dependent -
    lnL_independent) per tree (Pagel 1994), chi-square survival from scipy.stats
    (reference library); the bootstrap runs on bootstrap_trees trees of each set."""
    _, _, t = finished
    fits, tests = t["fits"], t["pair_tests"]
    assert list(tests.columns)[0] == "tree_set"
    assert tests.groupby("tree_set").size().to_dict() == {"dated": 5, "molecular": 5}
    ll = fits[fits["analysis"] == "lit"].set_index(["tree_set", "model", "tree"])["log_likelihood"]
    differ = 0
    for row in tests.to_dict("records"):
        ts, tree = row["tree_set"], row["tree"]
        stat = max(0.0, 2 * (ll[(ts, "dependent", tree)] - ll[(ts, "independent", tree)]))
        assert row["statistic"] == pytest.approx(stat, abs=1e-7)
        assert row["p_chi2"] == pytest.approx(scipy.stats.chi2.sf(stat, row["df"]), rel=1e-8)
        other = "molecular" if ts == "dated" else "dated"
        differ += abs(ll[(ts, "dependent", tree)] - ll[(other, "dependent", tree)]) > 1e-6
    assert differ > 0  # the two sets' lengths differ, so their fits do
    boot = t["pair_bootstrap"]
    assert boot.groupby("tree_set")["tree"].nunique().to_dict() == {"dated": 2, "molecular": 2}
    assert (boot.groupby(["tree_set", "tree"]).size() == 3).all()
    summary = t["pair_summary"]
    assert summary["tree_set"].tolist() == ["dated", "molecular"]
    for row in summary.to_dict("records"):
        mine = tests[tests["tree_set"] == row["tree_set"]]
        assert row["n_trees"] == 5
        assert row["median_statistic"] == pytest.approx(mine["statistic"].median())
        assert row["n_trees_bootstrap"] == 2


def test_ancestral_tables_on_every_set(finished):
    """States and maps per set on its own trees: n_trees per set, the first set's clades
    (its summary tree) with each set's clade frequency; the molecular set holds the same
    topologies (mkforest.demo), so its frequencies equal the dated set's."""
    _, _, t = finished
    used = t["trees_used"].groupby("tree_set").size().to_dict()
    clades = t["clades"]
    for name in ("ancestral_states", "transitions", "state_times", "transitions_per_tree"):
        table = t[name]
        assert list(table.columns)[0] == "tree_set", name
        assert list(dict.fromkeys(table["tree_set"])) == ["dated", "molecular"], name
    states = t["ancestral_states"]
    for ts, g in states.groupby("tree_set"):
        assert set(g["clade"]) == set(clades["clade"])
        assert (g["n_trees"] <= used[ts]).all()
        freq = g.drop_duplicates("clade").set_index("clade")["clade_frequency"]
        want = clades.set_index("clade")["frequency"]
        assert np.allclose(freq.loc[want.index].astype(float), want.astype(float), equal_nan=True)
    trans = t["transitions"]
    for ts, g in trans.groupby("tree_set"):
        assert (g["n_trees"] == used[ts]).all()
        assert ((g["n_maps"] + g["n_maps_at_upper"]) == 4 * used[ts]).all()
    per_tree = t["transitions_per_tree"]
    assert per_tree.groupby("tree_set")["tree"].nunique().to_dict() == used
    # probabilities differ between sets somewhere (other branch lengths)
    a = states[states["tree_set"] == "dated"]["mean_probability"].to_numpy(float)
    b = states[states["tree_set"] == "molecular"]["mean_probability"].to_numpy(float)
    assert np.nanmax(np.abs(a - b)) > 1e-6


def test_data_check_and_clades_name_their_tree_set(finished):
    """Every table has tree_set: data_check's tree rows per set (each set's own counts),
    its rows about the trait table empty (they hold for every set); clades.tsv names the
    set whose trees gave its clades. Re-rooting is named for what it means."""
    _, _, t = finished
    check = t["data_check"]
    assert list(check.columns)[0] == "tree_set"
    trees = check[check["trait"] == "(trees)"]
    assert list(dict.fromkeys(trees["tree_set"])) == ["dated", "molecular"]
    used = trees[trees["item"] == "trees_used"].set_index("tree_set")["value"]
    assert used.to_dict() == t["trees_used"].groupby("tree_set").size().to_dict()
    assert check.loc[check["trait"] != "(trees)", "tree_set"].isna().all()
    items = set(trees["item"])
    assert "rerooted_by_mkforest" in items and "rooted" not in items
    assert set(t["clades"]["tree_set"]) == {"dated"}


def test_stage_jobs_follow_chunks_not_trees(finished):
    """Ancestral and bootstrap jobs: one per chunk of either set (5 trees, 3 per job: 2
    chunks per set), never one per tree."""
    work, out, _ = finished
    for analysis in ("glow", "habitat", "banding", "lit"):
        assert len(list((out / "ancestral" / analysis).glob("chunk_*.npz"))) == 4, analysis
    assert len(list((out / "pairs" / "lit" / "bootstrap").glob("chunk_*.tsv"))) == 4


def test_fraction_higher_is_the_mann_whitney_u_over_pairs():
    """U / (n m) with ties counted one half (scipy.stats.mannwhitneyu, reference library)."""
    rng = np.random.default_rng(2)
    x = np.round(rng.normal(0, 1, 23), 1)
    y = np.round(rng.normal(0.3, 1, 17), 1)
    u = scipy.stats.mannwhitneyu(x, y, alternative="two-sided").statistic
    assert fraction_higher(x, y) == pytest.approx(u / (len(x) * len(y)))


def test_lambda_p_value_is_the_boundary_mixture():
    """Self & Liang (1987): half chi-square(0) + half chi-square(1) for a null on the bound."""
    for stat in (0.5, 2.7, 6.0):
        assert lrt_p_value(stat, "lambda") == pytest.approx(0.5 * scipy.stats.chi2.sf(stat, 1))
        assert lrt_p_value(stat, "kappa") == pytest.approx(scipy.stats.chi2.sf(stat, 1))
    assert lrt_p_value(0.0, "lambda") == 1.0


def test_tree_sets_with_other_taxa_are_named(tmp_path):
    import yaml

    cfg = tiny_config(tmp_path)
    config = yaml.safe_load(cfg.read_text())
    data = tmp_path / "data"
    text = (data / "trees.nex").read_text()
    other = data / "other.nex"
    # rename one taxon in the TRANSLATE table
    first = next(line for line in text.splitlines() if "Lumasta_" in line)
    name = first.split()[1].rstrip(",")
    other.write_text(text.replace(name, "Lumasta_stranger"))
    del config["trees"]
    config["tree_sets"] = {
        "dated": {"file": str(data / "trees.nex")},
        "other": {"file": str(other)},
    }
    cfg.write_text(yaml.safe_dump(config, sort_keys=False))
    proc = run_snakemake(tmp_path, cfg)
    assert proc.returncode != 0
    log = (tmp_path / "results" / "tiny" / "logs" / "prepare_trees.log").read_text()
    assert "tree set 'other'" in log and "Lumasta_stranger" in log and "same tips" in log


def test_the_first_tree_set_is_the_configs_first(tmp_path):
    """The first set named in the config is the one whose facts head summary.json (the
    methods text's) and whose chunks come first, as FIRST_SET and the figures assume;
    here the config's order ('molecular', 'dated') is not the sorted order."""
    import json

    import yaml

    cfg = tiny_config(tmp_path)
    config = yaml.safe_load(cfg.read_text())
    del config["trees"]
    data = tmp_path / "data"
    config["tree_sets"] = {
        "molecular": {"file": str(data / "trees_molecular.nex"), "burnin": 2, "per_job": 3},
        "dated": {"file": str(data / "trees.nex"), "burnin": 1, "per_job": 3},
    }
    cfg.write_text(yaml.safe_dump(config, sort_keys=False))
    proc = run_snakemake(tmp_path, cfg, "results/tiny/tables/trees_used.tsv")
    assert proc.returncode == 0, proc.stderr[-3000:]
    folder = tmp_path / "results" / "tiny" / "prepared" / "trees"
    summary = json.loads((folder / "summary.json").read_text())
    assert summary["burnin_dropped"] == 2  # molecular's, not dated's 1
    assert list(summary["sets"]) == ["molecular", "dated"]
    assert json.loads((folder / "sets.json").read_text())["molecular"][0] == "0000"
    used = pd.read_csv(tmp_path / "results" / "tiny" / "tables" / "trees_used.tsv", sep="\t")
    assert used["tree_set"].iloc[0] == "molecular"
