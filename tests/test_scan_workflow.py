"""The all-pairs scan in the real workflow, on invented data that is not the demo: an
unrooted sample of trees with polytomies (rooted at the midpoint by the workflow), a
trait table with missing cells, a taxon absent from the table and a three-state trait
the scan leaves out.

Outside references beside each check: chi-square tail -- scipy.stats.chi2;
Benjamini-Hochberg adjusted values -- scipy.stats.false_discovery_control (both
general-purpose reference libraries; Benjamini & Hochberg 1995 for the method); the
independent hypothesis's ln L equals the sum of the two traits' unconstrained fits
(Pagel 1994; here against the ordinary fit stage's own fits of those traits).
"""

from __future__ import annotations

import dendropy
import numpy as np
import pandas as pd
import pytest
import yaml
from conftest import random_newick
from scipy.stats import chi2, false_discovery_control
from workflow_helpers import run_snakemake

from mkforest.errors import InputError
from mkforest.jobs.analyses import check_config

BINARY = ["crest", "webbing", "stripes", "burrow", "venom"]
N_TREES, N_TIPS = 5, 14


def write_inputs(work, seed=3):
    rng = np.random.default_rng(seed)
    lines = []
    for i in range(N_TREES):
        tree = dendropy.Tree.get(data=random_newick(rng, N_TIPS, prefix="sp"), schema="newick")
        tree.deroot()  # unrooted: the root's two branches become one, a basal trichotomy
        lines.append(f"tree t{i} = [&U] " + tree.as_string(schema="newick").strip())
    taxa = [f"sp{i}" for i in range(N_TIPS)]
    (work / "trees.nex").write_text("#NEXUS\nbegin trees;\n" + "\n".join(lines) + "\nend;\n")
    rows = ["taxon\t" + "\t".join(BINARY) + "\tsoil"]
    for t in taxa[:-1]:  # the last taxon has no row: absent_taxa: missing
        # about one cell in five missing, as '?' or left blank
        cells = [("yes", "no", "?", "")[rng.choice(4, p=[0.4, 0.4, 0.1, 0.1])] for _ in BINARY]
        rows.append("\t".join([t, *cells, ("clay", "sand", "loam")[int(rng.integers(3))]]))
    (work / "traits.tsv").write_text("\n".join(rows) + "\n")


def scan_config(work, **scan):
    config = {
        "run": "scan",
        "seed": 5,
        "trees": {
            "file": str(work / "trees.nex"),
            "burnin": 0,
            "per_job": 2,
            "root": "midpoint",
            "min_branch_length": 1e-3,
        },
        "traits": {
            "file": str(work / "traits.tsv"),
            "taxon_column": "taxon",
            "columns": [*BINARY, "soil"],
            "absent_taxa": "missing",
        },
        "models": {"free": {"kind": "unconstrained"}},
        "fitting": {"starts": 2},
        "ancestral": {"enabled": False},
        "scan": {"traits": "all", "jobs_per_chunk": 2, **scan},
    }
    path = work / "config.yaml"
    path.write_text(yaml.safe_dump(config, sort_keys=False))
    return path


@pytest.fixture(scope="module")
def scan_run(tmp_path_factory):
    work = tmp_path_factory.mktemp("scan")
    write_inputs(work)
    proc = run_snakemake(work, scan_config(work))
    assert proc.returncode == 0, proc.stderr[-4000:]
    out = work / "results" / "scan"
    read = {"keep_default_na": False, "na_values": ["", "nan"]}
    tables = {
        n: pd.read_csv(out / "tables" / f"{n}.tsv", sep="\t", **read)
        for n in ("scan", "scan_per_tree", "fits", "trees_used")
    }
    return work, out, tables


def test_every_binary_pair_once_per_tree(scan_run):
    _, _, t = scan_run
    per_tree, summary = t["scan_per_tree"], t["scan"]
    pairs = {tuple(sorted(p)) for p in zip(per_tree["trait_1"], per_tree["trait_2"])}
    assert len(pairs) == 10 and not any("soil" in p for p in pairs)  # 5 binary traits
    assert len(per_tree) == 10 * N_TREES
    assert sorted(per_tree["tree"].unique()) == sorted(t["trees_used"]["tree"].unique())
    for col in ("trait_1", "trait_2", "median_statistic", "median_p", "fraction_discovered"):
        assert col in summary
    assert {"q_value", "n_trees", "tree_set"} <= set(summary)
    assert len(summary) == 10 and (summary["n_trees"] == N_TREES).all()
    # sorted by evidence: fraction discovered down, then median p up
    key = list(zip(-summary["fraction_discovered"], summary["median_p"]))
    assert key == sorted(key)


def test_independent_lnl_equals_the_fit_stage_single_fits(scan_run):
    # Pagel 1994: ln L(independent) = ln L(trait 1, unconstrained) + ln L(trait 2, ...),
    # against the ordinary fit stage's fits (other seeds, same optimum)
    _, _, t = scan_run
    fits = t["fits"][t["fits"]["model"] == "free"].set_index(["analysis", "tree"])
    for r in t["scan_per_tree"].itertuples():
        total = (
            fits.loc[(r.trait_1, r.tree), "log_likelihood"]
            + fits.loc[(r.trait_2, r.tree), "log_likelihood"]
        )
        assert r.log_likelihood_null == pytest.approx(total, abs=1e-4)
        assert r.log_likelihood_alternative >= r.log_likelihood_null - 1e-9


def test_per_tree_p_and_q_values_against_scipy(scan_run):
    _, _, t = scan_run
    pt = t["scan_per_tree"]
    # chi-square tail, scipy.stats.chi2; dependent vs independent on binary pairs: 4 df
    assert (pt["df"] == 4).all()
    np.testing.assert_allclose(pt["p_value"], chi2.sf(pt["statistic"], 4), rtol=1e-8)
    for _, g in pt.groupby("tree"):
        q = false_discovery_control(g["p_value"].to_numpy())  # Benjamini-Hochberg, scipy
        np.testing.assert_allclose(g["q_value"], q, rtol=1e-8)
        assert (g["discovery"].astype(str).str.lower().eq("true") == (q <= 0.05)).all()


def test_summary_recomputed_from_per_tree_rows(scan_run):
    _, _, t = scan_run
    pt, s = t["scan_per_tree"], t["scan"]
    for r in s.itertuples():
        g = pt[(pt["trait_1"] == r.trait_1) & (pt["trait_2"] == r.trait_2)]
        assert r.median_p == pytest.approx(float(np.median(g["p_value"])), rel=1e-5)
        assert r.median_statistic == pytest.approx(float(np.median(g["statistic"])), rel=1e-5)
        found = g["discovery"].astype(str).str.lower().eq("true").mean()
        assert r.fraction_discovered == pytest.approx(found)
    np.testing.assert_allclose(
        s["q_value"], false_discovery_control(s["median_p"].to_numpy()), rtol=1e-4
    )


def test_jobs_figure_and_methods(scan_run):
    _, out, t = scan_run
    # 3 chunks of trees (5 trees, 2 per job) x (1 single-fit job + 2 pair jobs)
    assert len(list((out / "logs" / "scan").glob("chunk_*.job_*.log"))) == 3 * 2
    assert len(list((out / "logs" / "scan").glob("chunk_*.singles.log"))) == 3
    png = out / "plots" / "scan.png"
    assert png.is_file() and png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    methods = (out / "methods.md").read_text()
    assert "**All-pairs scan.**" in methods and "Benjamini & Hochberg 1995" in methods
    assert "### All-pairs scan" in methods


@pytest.mark.parametrize(
    "scan, words",
    [
        ({"traits": ["crest", "wings"]}, ["scan.traits", "'wings'"]),
        ({"traits": ["crest", "soil"]}, ["scan.traits", "'soil'", "3 states", "joint_states"]),
        ({"traits": ["crest", "crest", "venom"]}, ["scan.traits", "'crest' twice"]),
        ({"level": 0.05}, ["scan", "traits"]),
    ],
)
def test_config_mistakes_name_key_and_trait(tmp_path, scan, words):
    write_inputs(tmp_path)
    raw = yaml.safe_load(scan_config(tmp_path).read_text())
    raw["scan"] = scan
    with pytest.raises(InputError) as err:
        check_config(raw)
    for w in words:
        assert w in str(err.value)


def test_minimal_block_fills_defaults(tmp_path):
    write_inputs(tmp_path)
    raw = yaml.safe_load(scan_config(tmp_path).read_text())
    raw["scan"] = {"traits": "all"}
    config = check_config(raw)
    assert config["scan"] == {
        "traits": "all",
        "joint_states": 4,
        "alternatives": ["dependent"],
        "level": 0.05,
        "root": "uniform",
        "hidden_classes": 1,
        "class_switch": "equal",
        "jobs_per_chunk": "auto",
    }


@pytest.mark.parametrize("n_traits, jobs", [(4, 1), (8, 2), (30, 16), (50, 16)])
def test_jobs_per_chunk_is_bounded(n_traits, jobs):
    # 6, 28, 435 and 1,225 pairs: one job per 25 pairs, at most 16, whatever the trees
    from mkforest.jobs import scan_plan

    config = {"traits": {"columns": [f"t{i}" for i in range(n_traits)]}, "scan": {"traits": "all"}}
    assert scan_plan.jobs_per_chunk(config) == jobs
    pairs = [(a, b) for i, a in enumerate("abcdefg") for b in "abcdefg"[i + 1 :]]
    dealt = [scan_plan.pairs_of_job(pairs, j, 3) for j in range(3)]
    assert sorted(p for d in dealt for p in d) == sorted(pairs)
    assert max(map(len, dealt)) - min(map(len, dealt)) <= 1
