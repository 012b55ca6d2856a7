"""Manifest, methods text and HTML report of real workflow runs on a tiny generated data set."""

from __future__ import annotations

import hashlib
import importlib.metadata
import json
import os
import re
import shutil
import subprocess
import sys
import tarfile
from datetime import datetime
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml
from provenance_runs import (
    RUN,
    SHA256SUM,
    base_config,
    finished_run,
    mkforest,
    prepare_workdir,
)
from workflow_helpers import REPO, run_snakemake

from mkforest.data.config import validate_config
from mkforest.data.traits import traits_from_json
from mkforest.jobs.analyses import analysis_setup
from mkforest.report.citations import REFERENCES
from mkforest.report.methods import methods_text, read_tables
from mkforest.report.provenance import software_versions

SNAKEMAKE = str(Path(sys.executable).with_name("snakemake"))


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    return finished_run(tmp_path_factory)


def out_dir(work):
    return work / "results" / RUN


def manifest_of(work):
    return json.loads((out_dir(work) / "manifest.json").read_text())


def tsv(work, name):
    return pd.read_csv(out_dir(work) / "tables" / f"{name}.tsv", sep="\t")


# --------------------------------------------------------------------------- manifest


def test_manifest_hashes_every_result_and_input(run):
    """Checksums against an outside implementation (coreutils' sha256sum) and hashlib."""
    work, cfg = run
    m = manifest_of(work)
    listed = {r["path"]: r for r in m["outputs"]}
    on_disk = {
        p.relative_to(out_dir(work)).as_posix()
        for sub in ("tables", "plots")
        for p in (out_dir(work) / sub).rglob("[!.]*")
        if p.is_file()
    }
    on_disk.add("methods.md")
    assert set(listed) == on_disk  # every table, plot and the methods text
    assert "manifest.json" not in listed
    paths = [out_dir(work) / p for p in sorted(listed)]
    sums = subprocess.run(
        [*SHA256SUM, *map(str, paths)], capture_output=True, text=True, check=True
    ).stdout.splitlines()
    for line, p in zip(sums, sorted(listed)):
        assert line.split()[0] == listed[p]["sha256"], p
        assert listed[p]["bytes"] == (out_dir(work) / p).stat().st_size
    roles = {r["role"]: r for r in m["inputs"]}
    assert set(roles) == {"trees", "traits", "config"}
    for role, rel in (("trees", "data/trees.nex"), ("traits", "data/traits.tsv")):
        assert roles[role]["path"] == rel
        assert roles[role]["sha256"] == hashlib.sha256((work / rel).read_bytes()).hexdigest()
    # given on the command line as an absolute path under the working folder: recorded
    # relative to it (issue 21, item 12: no home folder in an archive)
    assert cfg.is_absolute() and roles["config"]["path"] == "config.yaml"
    assert roles["config"]["sha256"] == hashlib.sha256(cfg.read_bytes()).hexdigest()


def test_manifest_settings_trees_software_and_times(run):
    work, cfg = run
    m = manifest_of(work)
    # the resolved config: the user's file with every default filled in
    assert m["config"] == validate_config(yaml.safe_load(cfg.read_text()))
    assert m["config"]["fitting"]["lower"] == 1e-6 and m["config"]["criterion"] == "aicc"
    assert m["seed"] == 11 and m["run"] == RUN
    # burn-in of 1 tree of the 6 in the file leaves positions 1..5 (0-based)
    assert m["trees"]["positions"] == tsv(work, "trees_used")["tree"].tolist() == [1, 2, 3, 4, 5]
    assert m["trees"]["n_used"] == 5
    sw = m["software"]
    for dist in ("numpy", "scipy", "dendropy", "pandas", "matplotlib", "numba", "mkforest"):
        assert sw[dist] == importlib.metadata.version(dist)
    version = subprocess.run([SNAKEMAKE, "--version"], capture_output=True, text=True).stdout
    assert sw["snakemake"] == version.strip()
    assert sw["python"] == ".".join(map(str, sys.version_info[:3]))
    assert m["platform"]["machine"] and m["platform"]["system"]
    inv = m["invocation"]
    # paths relative to the project: the config file by its name, no absolute working directory
    assert "--configfile" in inv["command"] and cfg.name in inv["command"]
    assert "working_directory" not in inv
    assert str(work.resolve()) not in json.dumps(inv) and str(work) not in json.dumps(inv)
    # the code that ran: its version and, from a git checkout, the commit
    src = m["mkforest_source"]
    assert src["version"] == importlib.metadata.version("mkforest")
    head = subprocess.run(
        ["git", "-C", str(REPO), "rev-parse", "HEAD"], capture_output=True, text=True
    )
    if head.returncode == 0:
        assert src["git_commit"] == head.stdout.strip()
        assert isinstance(src["uncommitted_changes"], bool)
    started, finished = (datetime.fromisoformat(inv[k]) for k in ("started", "finished"))
    assert started <= finished


def test_second_invocation_does_not_rewrite_the_manifest(run, tmp_path):
    """The start time and command line are not rerun triggers: a finished run stays finished."""
    work, cfg = run
    before = (out_dir(work) / "manifest.json").read_bytes()
    proc = run_snakemake(work, cfg, "--dry-run")
    assert proc.returncode == 0, proc.stderr[-2000:]
    assert "Nothing to be done" in proc.stdout + proc.stderr
    assert (out_dir(work) / "manifest.json").read_bytes() == before


# --------------------------------------------------------------------------- methods text


def _fmt(x):
    """Two decimals, '<0.01' for tiny positive values (the rounding the text promises)."""
    return "<0.01" if 0 < x < 0.005 else f"{x:.2f}"


def _section(text, analysis):
    m = re.search(rf"^### {re.escape(analysis)}\n(.*?)(?=^### |^## )", text, re.S | re.M)
    assert m, f"no results section for {analysis}"
    return m.group(1)


def test_methods_numbers_are_those_of_the_tables(run):
    """Support figures recomputed here from fits.tsv (AICc per tree), not read from the
    summary table the text was written from."""
    work, _ = run
    text = (out_dir(work) / "methods.md").read_text()
    fits = tsv(work, "fits")
    used = tsv(work, "trees_used")
    n = len(used)
    assert f"each of {n} trees" in text
    assert f"positions {used['tree'].min()} to {used['tree'].max()}" in text
    # burn-in counted from the file itself: trees in it, and the first position used
    in_file = sum(
        1
        for line in (work / "data" / "trees.nex").read_text().splitlines()
        if line.strip().upper().startswith("TREE ")
    )
    assert used["tree"].min() == 1
    assert f"the first tree of the {in_file} in the file was discarded as burn-in" in text
    assert "2 starting points" in text and "between 1e-06 and 10000" in text
    for analysis, g in fits.groupby("analysis"):
        sec = _section(text, analysis)
        aicc = g.pivot(index="tree", columns="model", values="aicc")
        delta = aicc.sub(aicc.min(axis=1), axis=0)
        weights = np.exp(-delta / 2)
        weights = weights.div(
            weights.sum(axis=1), axis=0
        )  # Akaike weights (Burnham & Anderson 2002)
        order = weights.mean().sort_values(ascending=False).index
        best = order[0]
        k_best = int((delta[best] == 0).sum())
        assert (
            f"{best} received the most support (mean Akaike weight "
            f"{_fmt(weights[best].mean())}; lowest AICc on {k_best} of {n} trees)"
        ) in sec
        for model in order[1:]:
            d = delta[model]
            assert (
                f"{model} (mean weight {_fmt(weights[model].mean())}; lowest AICc on "
                f"{int((d == 0).sum())} of {n} trees; median ΔAICc {_fmt(d.median())}, "
                f"95% interval across trees {_fmt(d.quantile(0.025))} to "
                f"{_fmt(d.quantile(0.975))})"
            ) in sec
        # rates of the best model: medians across the trees where the data bound the rate
        # (rates.tsv at_bound neither upper nor open), the others counted beside them
        rates = tsv(work, "rates")
        r = rates[(rates["analysis"] == analysis) & (rates["model"] == best)]
        for (a, b), g in r.groupby(["from_state", "to_state"]):
            unbounded = g["at_bound"].fillna("").astype(str).isin(["upper", "open"])
            if (~unbounded).any():
                assert f"{a}→{b} {_fmt(g.loc[~unbounded, 'rate'].median())}" in sec
            if unbounded.all():
                assert f"{a}→{b} not bounded above by the data on any tree" in sec
            elif unbounded.any():
                k = int((~unbounded).sum())
                assert (
                    f"over the {k} tree{'' if k == 1 else 's'} where the data bound it; not "
                    f"bounded above on {int(unbounded.sum())}"
                ) in sec
        # every caution of the summary table is repeated under the analysis
        support = tsv(work, "model_support")
        for row in support[support["analysis"] == analysis].to_dict("records"):
            if isinstance(row["caution"], str) and row["caution"]:
                assert f"- {row['model']}: {row['caution']}" in sec


def test_methods_cite_what_ran_and_only_that(run):
    work, _ = run
    text = (out_dir(work) / "methods.md").read_text()
    refs = text.split("## References", 1)[1]
    for key in ("felsenstein1981", "lewis2001", "akaike1974", "hurvich1989", "burnham2002"):
        r = REFERENCES[key]
        assert r.cite() in text and r.full() in refs
    # this run has no pairs, no ancestral stage, a uniform root and AICc: none of these appear
    for key in (
        "pagel1994",
        "goldman1993",
        "yang1995",
        "nielsen2002",
        "huelsenbeck2003",
        "fitzjohn2009",
        "schwarz1978",
        "andrews2000",
        "berger1994",
    ):
        assert REFERENCES[key].cite() not in text
    assert "Ancestral states" not in text and "Trait pairs" not in text
    # few trees: the text says so (summarise.FEW_TREES is 20; this run has 5)
    assert "only 5 trees: intervals across trees are rough" in text


def _paragraph(text):
    m = re.search(
        r"^## Methods in one paragraph\n\n(.+?)\n\n## Methods in full\n", text, re.S | re.M
    )
    assert m, "no paste-ready paragraph under its own heading"
    assert "\n" not in m.group(1)  # one paragraph
    return m.group(1)


IDENTIFIERS = (
    "first_depends_on_second",
    "second_depends_on_first",
    "data_weighted",
    "unconstrained",
    "aicc",
    "kind:",
    "per_job",
    "burnin",
)


def test_methods_open_with_one_paragraph_from_the_tables(run):
    """<= 250 words; the numbers are those of trees_used.tsv, data_check.tsv and the
    config; each model's name in quotes once, with its structure in words."""
    work, _ = run
    text = (out_dir(work) / "methods.md").read_text()
    para = _paragraph(text)
    assert (
        text.index("## Methods in one paragraph")
        < text.index("## Methods in full")
        < text.index("## Results")
        < text.index("## References")
    )
    assert len([w for w in para.split() if any(c.isalnum() for c in w)]) <= 250
    used, check = tsv(work, "trees_used"), tsv(work, "data_check")
    assert f"for {used['n_tips'].iloc[0]} taxa on each of {len(used)} trees" in para
    assert "first tree discarded as burn-in" in para  # burnin: 1 in base_config
    k = {
        t: int(check[(check["trait"] == t) & check["item"].str.startswith("state:")].shape[0])
        for t in ("glow", "habitat")
    }
    assert k == {"glow": 2, "habitat": 3}
    assert "glow (2 states)" in para and "habitat (3 states)" in para
    assert "from 2 starting points per fit" in para
    assert para.count('"one_rate"') == 1 and para.count('"free"') == 1
    assert '"one_rate" (one rate for every change)' in para
    assert '"free" (a separate rate for every change)' in para
    assert "ranked by AICc" in para and "mean Akaike weight" in para
    assert "every state equally probable at the root" in para
    sw = manifest_of(work)["software"]
    assert f"mkforest {sw['mkforest']}" in para and f"Snakemake {sw['snakemake']}" in para
    assert REFERENCES["molder2021"].full() in text.split("## References", 1)[1]
    for word in IDENTIFIERS:
        assert word not in para
    # nothing of stages that did not run
    assert "ancestral" not in para.lower() and "likelihood-ratio" not in para


def _text_for(work, config):
    tables = read_tables({p.stem: p for p in (out_dir(work) / "tables").glob("*.tsv")})
    traits = traits_from_json(json.loads((out_dir(work) / "prepared" / "traits.json").read_text()))
    config = validate_config(config)
    models = {a: analysis_setup(config, a, traits)[1] for a in ("glow", "habitat")}
    return methods_text(config, tables, models, software_versions())


def test_methods_follow_the_settings(run):
    """Root treatment, criterion and starts change the words and the references."""
    work, _ = run
    cfg = base_config()
    cfg["models"]["free"]["root"] = "data_weighted"
    cfg["criterion"] = "bic"
    cfg["fitting"] = {"starts": 1, "max_starts": 1}
    text = _text_for(work, cfg)
    assert REFERENCES["fitzjohn2009"].cite() in text and REFERENCES["fitzjohn2009"].full() in text
    assert "each root state weighted by its conditional likelihood" in text
    assert REFERENCES["schwarz1978"].cite() in text and "ranked by BIC" in text
    assert REFERENCES["hurvich1989"].cite() not in text
    assert "convergence could not be checked" in text
    cfg = base_config(trees={"file": "data/trees.nex", "burnin": 0.25, "thin": 2})
    text = _text_for(work, cfg)
    # 25% of the 6 trees in the file is 1.5: one tree dropped, and the text says one
    assert "the first tree of the 6 in the file (25%) was discarded as burn-in" in text
    assert "every 2nd tree was kept" in text


# --------------------------------------------------------------------------- HTML report


def _report_entries(html: str) -> dict:
    """{path: caption html} of the files embedded in a Snakemake report."""
    out = {}
    for m in re.finditer(
        r'"(results/[^"]+)": \{"name": "[^"]*", "filename": "[^"]*", '
        r'"labels": [^,]*, "size": "[^"]*", "caption": "((?:[^"\\]|\\.)*)"',
        html,
    ):
        out[m.group(1)] = m.group(2)
    return out


def test_report_builds_offline_with_every_table_and_plot(run, tmp_path):
    work, cfg = run
    report = tmp_path / "report.html"
    cmd = [
        SNAKEMAKE,
        "--snakefile",
        str(REPO / "Snakefile"),
        "--directory",
        str(work),
        "--configfile",
        str(cfg),
        "--cores",
        "1",
        "--report",
        str(report),
    ]
    if shutil.which("unshare") and subprocess.run(["unshare", "-rn", "true"]).returncode == 0:
        cmd = ["unshare", "-rn", *cmd]  # no network at all while it builds
    else:
        pytest.skip("cannot start a process without network here (unshare -rn)")
    proc = subprocess.run(
        cmd, capture_output=True, text=True, timeout=600, env=dict(os.environ, PYTHONPATH=str(REPO))
    )
    assert proc.returncode == 0, proc.stderr[-3000:]
    html = report.read_text()
    entries = _report_entries(html)
    outputs = {f"results/{RUN}/{r['path']}" for r in manifest_of(work)["outputs"]}
    # every table and figure, each figure once: its PNG (the SVG for print stays on disk);
    # the per-tree tables stay on disk, named in the captions of their summaries
    per_tree = {
        f"results/{RUN}/tables/{t}.tsv" for t in ("fits", "rates", "averaged_rates", "branch_tests")
    }
    expected = {p for p in outputs if not p.endswith(".svg")} - per_tree
    expected.add(f"results/{RUN}/manifest.json")
    assert expected <= set(entries), sorted(expected - set(entries))
    assert not per_tree & set(entries)
    captions = " ".join(entries.values())
    for path in per_tree:
        assert (
            path.replace(f"results/{RUN}/", "results/&lt;run&gt;/") in captions
            or path.replace(f"results/{RUN}/", "results/<run>/") in captions
        ), path
    assert not [p for p in entries if p.endswith(".svg")]
    assert {p[:-4] for p in outputs if p.endswith(".svg")} == {
        p[:-4] for p in outputs if p.endswith(".png")
    }
    for path in expected:
        assert len(entries[path]) > 40, f"{path} has no caption"
    # the landing page names this run's methods text, not a placeholder
    assert f"results/{RUN}/methods.md" in html
    assert "results/&lt;run&gt;/methods.md" not in html and "results/<run>/methods.md" not in html
    # the page loads nothing from elsewhere
    assert not re.search(r'<(script|link|img)[^>]+(src|href)="https?://', html)


# --------------------------------------------------------------------------- slower runs


@pytest.mark.slow
def test_methods_mention_pairs_and_ancestral_states_when_they_ran(tmp_path_factory):
    cfg = base_config(
        traits={
            "file": "data/traits.tsv",
            "taxon_column": "taxon",
            "columns": ["banding", "aperture"],
        },
        pairs={
            "band_aperture": {
                "traits": ["banding", "aperture"],
                "bootstrap": 9,
                "bootstrap_trees": 2,
            }
        },
        ancestral={"enabled": True, "maps": 4},
    )
    work = tmp_path_factory.mktemp("full")
    path = prepare_workdir(work, cfg)
    proc = run_snakemake(work, path)
    assert proc.returncode == 0, proc.stderr[-4000:]
    text = (out_dir(work) / "methods.md").read_text()
    for key in (
        "pagel1994",
        "goldman1993",
        "yang1995",
        "nielsen2002",
        "huelsenbeck2003",
        "margush1981",
        "andrews2000",
        "berger1994",
    ):
        assert REFERENCES[key].cite() in text and REFERENCES[key].full() in text
    assert "9 data sets simulated under the fitted null hypothesis on each of 2 trees" in text
    assert "**Trait pairs.**" in text and "**Ancestral states.**" in text
    assert "4 stochastic character maps per tree" in text
    para = _paragraph(text)
    assert len([w for w in para.split() if any(c.isalnum() for c in w)]) <= 250
    assert (
        "For banding with aperture, hypotheses of joint change (one trait changing at a "
        "time; Pagel 1994) were compared on each tree by likelihood-ratio tests: independent "
        "change and mutual dependence; a parametric bootstrap (Goldman 1993) simulated 9 data "
        "sets on each of 2 trees."
    ) in para
    assert "4 stochastic character maps per tree" in para
    for word in IDENTIFIERS:
        assert word not in para
    # the pair test sentence carries the numbers of pair_summary.tsv
    summary = tsv(work, "pair_summary")
    sec = _section(text, "band_aperture")
    for r in summary.to_dict("records"):
        k = int(round(r["fraction_reject_chi2"] * r["n_trees"]))
        assert (
            f"rejected {r['null']} on {k} of {r['n_trees']} trees (median statistic "
            f"{_fmt(r['median_statistic'])}"
        ) in sec
        kb = int(round(r["fraction_reject_bootstrap"] * r["n_trees_bootstrap"]))
        assert f"the parametric bootstrap rejected it on {kb} of 2 trees" in sec
        assert f"- {r['null']} against {r['alternative']}: {r['caution']}" in sec
    # transitions: the expected counts per direction, one decimal
    trans = tsv(work, "transitions")
    sec = _section(text, "banding")
    for r in trans[trans["analysis"] == "banding"].to_dict("records"):
        assert f"{r['from_state']}→{r['to_state']} {r['mean_count']:.1f}" in sec
    # the manifest lists the pair and ancestral tables too
    listed = {r["path"] for r in manifest_of(work)["outputs"]}
    assert {
        "tables/pair_tests.tsv",
        "tables/ancestral_states.tsv",
        "tables/transitions_per_tree.tsv",
    } <= listed


@pytest.mark.slow
def test_unpacked_archive_reruns_to_the_same_results(run, tmp_path):
    """Archive, unpack elsewhere, rerun from the archive's own config: same fits.tsv, and
    every result file equal to the original run's (checked by verify --against)."""
    work, _ = run
    proc = mkforest(
        "archive", out_dir(work), "--author", "Ferrand, Ilse", "--output", tmp_path / "deposit"
    )
    assert proc.returncode == 0, proc.stderr
    archive = tmp_path / "deposit" / f"{RUN}-archive.tar.gz"
    with tarfile.open(archive) as tar:
        tar.extractall(tmp_path / "unpacked", filter="data")
    top = tmp_path / "unpacked" / f"{RUN}-archive"
    rerun = run_snakemake(top, top / "config.yaml", "--config", f"run={RUN}-rerun")
    assert rerun.returncode == 0, rerun.stderr[-4000:]
    original = out_dir(work) / "tables" / "fits.tsv"
    again = top / "results" / f"{RUN}-rerun" / "tables" / "fits.tsv"
    assert again.read_bytes() == original.read_bytes()
    check = mkforest(
        "verify",
        top / "results" / f"{RUN}-rerun",
        "--against",
        top / "results" / RUN / "manifest.json",
    )
    assert check.returncode == 0, check.stdout
    # the two manifests differ only where the run's name, place and time do
    a = manifest_of(work)
    b = json.loads((top / "results" / f"{RUN}-rerun" / "manifest.json").read_text())
    assert a["outputs"] == b["outputs"]
    assert a["software"] == b["software"] and a["platform"] == b["platform"]
    assert a["trees"]["positions"] == b["trees"]["positions"]
    assert {r["role"]: r["sha256"] for r in a["inputs"] if r["role"] != "config"} == {
        r["role"]: r["sha256"] for r in b["inputs"] if r["role"] != "config"
    }
