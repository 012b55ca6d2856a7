"""The input catalogue: invented inputs of the shapes users bring, through the real workflow.

Every case either runs to the end with sound numbers or stops with one sentence naming the
file, the item and what to do, and a finished run's results are never lost. The cases are
listed (by number) in docs/troubleshooting.md; keep the two in step.

To stay fast, cases are batched: several odd columns share one trait table, several tree
shapes share one tree file, errors found before any job runs are checked with --dry-run,
errors found while preparing the trees stop after that one job. Fits use 2 starts.

Outside references: ln L recomputed at the reported rates by the plain pruning of
tests/reference.py (expm per branch, Felsenstein 1981), which must agree with the workflow.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml
from catalogue_inputs import SHAPES, TAXA, posterior_nexus, quote, rename, unresolved_sample
from reference import pruning_log_likelihood, ref_tree_from_newick
from workflow_helpers import run_snakemake

from mkforest.data.trees import read_trees

RUN = "cat"
PNG = b"\x89PNG\r\n\x1a\n"


def write_config(work: Path, **sections) -> Path:
    config = {
        "run": RUN,
        "seed": 5,
        "trees": {"file": "data/trees.nwk", "per_job": 50},
        "traits": {"file": "data/traits.csv", "columns": ["colour"]},
        "models": {"one": {"kind": "equal"}, "two": {"kind": "unconstrained"}},
        "fitting": {"starts": 2},
        "ancestral": {"enabled": False},
    }
    for key, value in sections.items():
        if isinstance(value, dict) and isinstance(config.get(key), dict):
            config[key] = {**config[key], **value}
        else:
            config[key] = value
    path = work / "config.yaml"
    path.write_text(yaml.safe_dump(config, sort_keys=False))
    return path


def tables(work: Path) -> dict:
    out = work / "results" / RUN / "tables"
    keep = dict(
        keep_default_na=False,
        na_values=["", "nan", "NaN"],
        dtype={"state": str, "from_state": str, "to_state": str, "detail": str, "caution": str},
    )
    return {p.stem: pd.read_csv(p, sep="\t", **keep) for p in out.glob("*.tsv")}


def text_of(proc) -> str:
    return proc.stdout + proc.stderr


def finished(proc, work: Path) -> None:
    """The run ended well, with its figures and manifest."""
    assert proc.returncode == 0, text_of(proc)[-4000:]
    run = work / "results" / RUN
    assert (run / "manifest.json").is_file() and (run / "methods.md").is_file()
    for png in (run / "plots").glob("*.png"):
        assert png.read_bytes()[:8] == PNG
    assert (run / "plots" / "support_weights.png").is_file()


def stopped(proc, *needles) -> str:
    """The run stopped with a message naming each needle, and no Python traceback."""
    text = text_of(proc)
    assert proc.returncode != 0, text[-3000:]
    for n in needles:
        assert n in text, f"{n!r} not in output:\n{text[-3000:]}"
    assert "Traceback (most recent call last)" not in text, text[-3000:]
    return text


def only_prepare(work: Path, cfg: Path):
    """Run the workflow up to the prepared trees (errors in the tree file show there)."""
    return run_snakemake(work, cfg, f"results/{RUN}/tables/trees_used.tsv", cores=1)


# --------------------------------------------------------------------------- case 1-13
# A posterior sample as samplers write it, with a trait table as spreadsheets write it.

CODE = {
    "Vexa minor": "0",
    "Vexa major": "1 ",
    "Olm_tarsi": "2",
    "Olm_grava": "0",
    "Quill's pod": "1",
    "Brun_a": " 2",
    "Brun_b": "0|1",
    "Brun_c": "?",
}
SINGLE = {t: "no" for t in TAXA} | {"Olm_grava": "yes"}


@pytest.fixture(scope="module")
def posterior_run(tmp_path_factory):
    work = tmp_path_factory.mktemp("posterior")
    (work / "data").mkdir()
    texts = unresolved_sample(n_trees=5, n_tips=8, seed=3, p_polytomy=0.3)
    posterior_nexus(work / "data" / "trees.nex", texts, TAXA)
    # a CSV with a byte-order mark, Windows line endings, spaces around cells, numeric state
    # codes, a missing and an ambiguous cell, and a taxon that is in no tree
    lines = ["taxon , code , single"] + [f"{t},{CODE[t]},{SINGLE[t]} " for t in TAXA]
    lines.append("Extra taxon,1,no")
    (work / "data" / "traits.csv").write_bytes(
        b"\xef\xbb\xbf" + "\r\n".join(lines).encode() + b"\r\n"
    )
    cfg = write_config(
        work,
        trees={"file": "data/trees.nex", "burnin": 0.1},
        traits={"columns": ["code", "single"]},
        models={"one": {"kind": "equal"}, "two": {"kind": "symmetric"}},
        ancestral={"enabled": True, "maps": 4},
    )
    proc = run_snakemake(work, cfg)
    return work, texts, proc


def test_posterior_sample_runs_to_the_end(posterior_run):
    """Cases 1-6: TRANSLATE table, per-tree comments, quoted names with spaces and quotes,
    a consensus with no clade above 50% (drawn as a star), polytomies, non-ultrametric trees."""
    work, texts, proc = posterior_run
    finished(proc, work)
    t = tables(work)
    fits = t["fits"]
    assert len(fits) == 5 * 2 * 2 and np.isfinite(fits["log_likelihood"]).all()
    assert (
        fits.loc[fits["analysis"] == "single", "n_taxa"] == 8
    ).all()  # every quoted name matched
    clades = t["clades"]
    assert list(clades["clade"]) == ["root"] and "unresolved" in clades["summary_tree"].iloc[0]
    root = t["ancestral_states"]
    for _, g in root.groupby("analysis"):
        assert g["mean_probability"].sum() == pytest.approx(1.0, abs=1e-6)
    run = work / "results" / RUN
    for trait in ("code", "single"):
        assert (run / "plots" / "ancestral_trees" / f"{trait}.png").read_bytes()[:8] == PNG
    methods = (run / "methods.md").read_text()
    assert "unresolved" in methods and "unrooted" not in methods
    # burn-in of 10% of 5 trees drops none, and the text says so (case 13)
    assert "discarded none" in methods and "first 10%" not in methods
    manifest = json.loads((run / "manifest.json").read_text())
    assert manifest["trees"]["positions"] == [0, 1, 2, 3, 4]


def test_posterior_sample_likelihoods_match_plain_pruning(posterior_run):
    """Sound numbers: ln L of tree 2 recomputed at the reported rates by the reference pruning."""
    work, texts, proc = posterior_run
    assert proc.returncode == 0, text_of(proc)[-3000:]
    t = tables(work)
    tree = ref_tree_from_newick(rename(texts[2], {i: quote(n) for i, n in enumerate(TAXA)}))
    states = ["0", "1", "2"]
    X = np.zeros((len(tree.tip_labels), 3))
    for v, label in enumerate(tree.tip_labels):
        cell = CODE[label].strip()
        X[v] = 1.0 if cell == "?" else [s in cell.split("|") for s in states]
    for model in ("one", "two"):
        rates = t["rates"][
            (t["rates"]["analysis"] == "code")
            & (t["rates"]["model"] == model)
            & (t["rates"]["tree"] == 2)
        ]
        Q = np.zeros((3, 3))
        for r in rates.to_dict("records"):
            Q[states.index(r["from_state"]), states.index(r["to_state"])] = r["rate"]
        np.fill_diagonal(Q, -Q.sum(axis=1))
        row = t["fits"][
            (t["fits"]["analysis"] == "code")
            & (t["fits"]["model"] == model)
            & (t["fits"]["tree"] == 2)
        ].iloc[0]
        assert pruning_log_likelihood(tree, X, Q) == pytest.approx(row["log_likelihood"], abs=1e-6)


def test_odd_trait_table_is_read_as_meant(posterior_run):
    """Cases 7-12: byte-order mark, Windows line endings, spaces around cells and headers,
    numeric codes kept as labels, one taxon in a state, a taxon in no tree."""
    work, _, proc = posterior_run
    assert proc.returncode == 0, text_of(proc)[-3000:]
    t = tables(work)
    check = t["data_check"]
    code = check[check["trait"] == "code"].set_index("item")
    assert [int(code.loc[f"state:{s}", "value"]) for s in "012"] == [2, 2, 2]
    assert int(code.loc["missing", "value"]) == 1 and int(code.loc["ambiguous", "value"]) == 1
    assert set(t["rates"].loc[t["rates"]["analysis"] == "code", "from_state"]) == {"0", "1", "2"}
    single = check[check["trait"] == "single"].set_index("item")
    assert int(single.loc["state:yes", "value"]) == 1 and int(single.loc["varies", "value"]) == 1
    assert single.loc["taxa_in_table_only", "detail"] == "Extra taxon"
    methods = (work / "results" / RUN / "methods.md").read_text()
    assert "Extra taxon" in methods and "in none of the trees" in methods
    trees = check[check["trait"] == "(trees)"].set_index("item")
    assert int(trees.loc["trees_in_file", "value"]) == 5
    assert int(trees.loc["dropped_as_burnin", "value"]) == 0


# --------------------------------------------------------------------------- case 14-19
# Zero-length branches, as birth-death simulators and some dating programs write them.

# ultrametric (height 1): a and b are sister tips on zero-length branches, e and f hang
# from a zero-length internal branch, g's branch is very short
ZERO_TREES = [
    "[&R] (((a:0,b:0):0.6,(c:0.3,d:0.3):0.3):0.4,((e:0.5,f:0.5):0,(g:1e-9,h:1e-9):0.499999999):0.5);",
    "[&R] (((a:0,b:0):0.6,(c:0.3,d:0.3):0.3):0.4,((e:0.5,g:0.5):0,(f:1e-9,h:1e-9):0.499999999):0.5);",
    "[&R] (((a:0.2,b:0.2):0.4,(c:0.3,d:0.3):0.3):0.4,((e:0.5,f:0.5):0,(g:1e-9,h:1e-9):0.499999999):0.5);",
]
ZERO_TABLE = (
    "taxon,colour,habit\n"
    "a,red,crawl\nb,blue,crawl\nc,blue,swim\nd,red,swim\ne,red,crawl\nf,blue,swim\n"
    "g,red,crawl\nh,blue,swim\n"
)


def _zero_workdir(work: Path, **sections) -> Path:
    (work / "data").mkdir(parents=True, exist_ok=True)
    (work / "data" / "trees.nwk").write_text("\n".join(ZERO_TREES) + "\n")
    (work / "data" / "traits.csv").write_text(ZERO_TABLE)
    return write_config(
        work,
        traits={"columns": ["colour", "habit"]},
        models={"one": {"kind": "equal"}, "two": {"kind": "symmetric", "applies_to": ["habit"]}},
        **sections,
    )


@pytest.fixture(scope="module")
def zero_run(tmp_path_factory):
    work = tmp_path_factory.mktemp("zero")
    cfg = _zero_workdir(work, ancestral={"enabled": True, "maps": 4})
    return work, cfg, run_snakemake(work, cfg)


def test_zero_length_sister_tips_run_to_the_end_and_say_so_loudly(zero_run):
    """Case 14: sister tips on zero-length branches in different states: every model is
    impossible on those trees; the run finishes with figures and manifest, and the data
    check, the cautions, the methods text and the run's last message all say so."""
    work, _, proc = zero_run
    finished(proc, work)
    run = work / "results" / RUN
    assert (run / "plots" / "ancestral_trees" / "colour.png").read_bytes()[:8] == PNG
    t = tables(work)
    check = t["data_check"]
    tips = check[check["item"] == "zero_length_tips"]
    assert tips["tree"].tolist() == [0, 1] and set(tips["detail"]) == {"a, b"}
    bad = check[(check["item"] == "impossible_zero_length_tips") & (check["trait"] == "colour")]
    assert bad["tree"].tolist() == [0, 1] and "a (red) vs b (blue)" in bad["detail"].iloc[0]
    assert not (
        (check["item"] == "impossible_zero_length_tips") & (check["trait"] == "habit")
    ).any()
    fits = t["fits"]
    colour = fits[fits["analysis"] == "colour"].set_index("tree")
    assert np.isneginf(colour.loc[[0, 1], "log_likelihood"]).all()
    assert np.isfinite(colour.loc[2, "log_likelihood"])
    row = t["model_support"].set_index(["analysis", "model"]).loc[("colour", "one")]
    assert "2 of 3 fits are impossible" in row["caution"]
    assert "of 1 fits" not in row["caution"]  # never "3 of 2 fits did not converge"
    methods = (run / "methods.md").read_text()
    assert "On 2 of the 3 trees, tips joined by zero-length branches differ in colour" in methods
    assert "Across the 1 of 3 trees on which colour could be fitted" in methods
    tail = text_of(proc)[-3000:]
    assert "mkforest: warning: colour / one: 2 of 3 fits are impossible" in tail
    # an impossible fit has no estimate: no rates, marked, and no "AICc undefined" note
    assert not colour.loc[[0, 1], "note"].str.contains("AICc undefined").any()
    rates = t["rates"][t["rates"]["analysis"] == "colour"]
    assert rates.loc[rates["tree"] < 2, "rate"].isna().all()
    assert (rates.loc[rates["tree"] < 2, "at_bound"] == "impossible").all()
    assert np.isfinite(rates.loc[rates["tree"] == 2, "rate"]).all()
    # summaries leave those trees out and count them, over the same trees as model_support
    summary = t["rate_summary"].set_index(["analysis", "model", "from_state", "to_state"])
    for model in ("one", "averaged"):
        s = summary.loc[("colour", model, "red", "blue")]
        assert s["n_impossible"] == 2 and s["n_trees"] == 1 == s["n_estimated"] + s["n_unbounded"]
    rs = t["rate_summary"]
    assert (rs.loc[rs["analysis"] == "habit", "n_impossible"] == 0).all()
    # the rates figure draws the possible tree only and counts the others
    from mkforest.report.plots import rates_across_trees

    fig = rates_across_trees(t["rates"], t["model_support"])
    note = fig.axes[0].get_title(loc="right")
    assert fig.axes[0].get_title(loc="left") == "colour" and "one on 2 of 3 trees" in note
    assert {x.get_text() for x in fig.axes[0].texts} == {"1/1"}
    assert fig.axes[1].get_title(loc="right") == ""
    # the ancestral stage skips them and says why
    anc = t["ancestral_states"]
    assert (anc.loc[anc["analysis"] == "colour", "n_trees"] <= 1).all()
    assert (
        anc.loc[anc["analysis"] == "colour", "caution"]
        .str.contains("2 of 3 trees skipped: the data are impossible there under every model")
        .all()
    )
    assert not anc.loc[anc["analysis"] == "habit", "caution"].str.contains("skipped").any()


def test_zero_length_internal_and_very_short_branches_are_sound(zero_run):
    """Cases 15-17: a zero-length internal branch (a polytomy in effect), branches of 1e-9,
    an ultrametric tree: habit is fitted on every tree and its ln L matches plain pruning."""
    work, _, proc = zero_run
    assert proc.returncode == 0, text_of(proc)[-3000:]
    t = tables(work)
    check = t["data_check"].set_index(["trait", "item"])
    assert int(check.loc[("(trees)", "zero_length_branches"), "value"]) == 3 + 3 + 1
    habit = t["fits"][t["fits"]["analysis"] == "habit"]
    assert np.isfinite(habit["log_likelihood"]).all()
    tree = ref_tree_from_newick(ZERO_TREES[0].replace("[&R] ", ""))
    cells = dict(line.split(",")[::2] for line in ZERO_TABLE.splitlines()[1:])
    X = np.array([[cells[lab] == "crawl", cells[lab] == "swim"] for lab in tree.tip_labels], float)
    rate = t["rates"][
        (t["rates"]["analysis"] == "habit")
        & (t["rates"]["model"] == "one")
        & (t["rates"]["tree"] == 0)
    ]["rate"].iloc[0]
    Q = np.array([[-rate, rate], [rate, -rate]])
    row = habit[(habit["model"] == "one") & (habit["tree"] == 0)].iloc[0]
    assert pruning_log_likelihood(tree, X, Q) == pytest.approx(row["log_likelihood"], abs=1e-6)


def test_changing_one_models_root_reruns_only_its_own_ancestral_jobs(zero_run, tmp_path):
    """Case 18: ancestral jobs hold only their own slice of the config."""
    work, cfg, proc = zero_run
    assert proc.returncode == 0, text_of(proc)[-3000:]
    config = yaml.safe_load(cfg.read_text())
    config["models"]["two"]["root"] = "stationary"  # 'two' applies to habit only
    cfg2 = tmp_path / "root_changed.yaml"
    cfg2.write_text(yaml.safe_dump(config))
    dry = run_snakemake(work, cfg2, "--dry-run", "--printshellcmds")
    text = text_of(dry)
    assert dry.returncode == 0, text[-2000:]
    anc = [line for line in text.splitlines() if "output:" in line and "/ancestral/" in line]
    assert anc and all("/ancestral/habit/" in line for line in anc), text[-3000:]
    fits = [line for line in text.splitlines() if "output:" in line and "/fits/" in line]
    assert fits and all("/fits/habit/two/" in line for line in fits), text[-3000:]


def test_minimum_branch_length_makes_every_tree_usable(tmp_path):
    """Case 19: trees.min_branch_length lengthens zero-length branches; applied, counted in
    the data check and stated in the methods text; no fit is impossible."""
    cfg = _zero_workdir(
        tmp_path, trees={"file": "data/trees.nwk", "per_job": 50, "min_branch_length": 1e-4}
    )
    proc = run_snakemake(tmp_path, cfg)
    finished(proc, tmp_path)
    t = tables(tmp_path)
    assert np.isfinite(t["fits"]["log_likelihood"]).all()
    check = t["data_check"].set_index(["trait", "item"])
    # 3 zero-length branches on tree 0, 3 on tree 1, 1 on tree 2, and two of 1e-9 on each
    assert int(check.loc[("(trees)", "branches_lengthened"), "value"]) == 7 + 2 * 3
    methods = (tmp_path / "results" / RUN / "methods.md").read_text()
    assert (
        "Branches shorter than 0.0001 were lengthened to 0.0001 before fitting (13 branches"
        in methods
    )
    assert (t["model_support"]["n_impossible"] == 0).all()
    assert (t["rates"]["at_bound"] != "impossible").all()
    warnings = [x for x in text_of(proc).splitlines() if x.startswith("mkforest: warning")]
    assert not any("impossible" in x for x in warnings)  # (paths may hold any word)


# --------------------------------------------------------------------------- case 20-22
# Unrooted samples (analyses without a clock write a basal trifurcation).

UNROOTED = [
    "(a:0.3,b:0.2,((c:0.1,d:0.4):0.2,(e:0.3,f:0.1):0.1):0.3);",
    "(a:0.3,b:0.25,((c:0.1,e:0.4):0.2,(d:0.3,f:0.1):0.1):0.2);",
    "(a:0.35,b:0.2,((c:0.2,d:0.4):0.1,(e:0.3,f:0.15):0.1):0.3);",
]
UNROOTED_TABLE = "taxon\tcolour\na\tred\nb\tred\nc\tblue\nd\tblue\ne\tred\nf\tblue\n"


def _unrooted_workdir(work: Path, **trees) -> Path:
    (work / "data").mkdir(parents=True, exist_ok=True)
    (work / "data" / "trees.nwk").write_text("\n".join(UNROOTED) + "\n")
    (work / "data" / "traits.tsv").write_text(UNROOTED_TABLE)
    return write_config(
        work, trees={"file": "data/trees.nwk", **trees}, traits={"file": "data/traits.tsv"}
    )


def test_unrooted_sample_rooted_on_an_outgroup(tmp_path):
    """Case 20: trees.root: {outgroup: [a, b]}, recorded in the manifest and methods text;
    case 21: a finished run's results survive a later broken tree file."""
    cfg = _unrooted_workdir(tmp_path, root={"outgroup": ["a", "b"]})
    proc = run_snakemake(tmp_path, cfg)
    finished(proc, tmp_path)
    run = tmp_path / "results" / RUN
    manifest = json.loads((run / "manifest.json").read_text())
    assert manifest["trees"]["root"] == {"outgroup": ["a", "b"]}
    assert "rooted on the outgroup a and b" in (run / "methods.md").read_text()
    assert np.isfinite(tables(tmp_path)["fits"]["log_likelihood"]).all()
    # case 21: the tree file is broken afterwards; the run stops naming it, results kept
    before = {p: p.read_bytes() for p in (run / "tables").glob("fits.tsv")}
    before[run / "manifest.json"] = (run / "manifest.json").read_bytes()
    (tmp_path / "data" / "trees.nwk").write_text("(a:0.3,b:0.2,((c:0.1,d:0.4):0.2;\n")
    again = run_snakemake(tmp_path, cfg)
    stopped(again, "trees.nwk")
    for path, data in before.items():
        assert path.read_bytes() == data


def test_unrooted_sample_without_a_rooting_stops_naming_the_key(tmp_path):
    """Case 22."""
    cfg = _unrooted_workdir(tmp_path)
    stopped(only_prepare(tmp_path, cfg), "trees.nwk", "tree 0", "unrooted", "trees.root")


# --------------------------------------------------------------------------- case 23-31, 45, 46
# Tree files that cannot be used: the job that reads them stops with one sentence.

TREE_ERRORS = {
    # case: (tree file text, config changes, words the message must hold)
    "outgroup_not_a_clade": (
        UNROOTED,
        {"root": {"outgroup": ["a", "c"]}},
        ["tree 0", "not a clade", "trees.root.outgroup"],
    ),
    "outgroup_misspelt": (
        UNROOTED,
        {"root": {"outgroup": ["A"]}},
        ["outgroup taxon 'A'", "did you mean 'a'"],
    ),
    "branch_without_length": (
        ["[&R] ((a:1,b:1):1,(c:1,(d:1,e:1):1):1,f);"],
        {},
        ["tree 0", "tip 'f'", "no length"],
    ),
    "negative_branch": (
        ["[&R] ((a:1,b:-0.5):1,(c:1,(d:1,e:1):1):1,f:1);"],
        {},
        ["tree 0", "tip 'b'", "-0.5"],
    ),
    "tips_differ": (
        [
            "[&R] ((a:1,b:1):1,(c:1,(d:1,e:1):1):1,f:1);",
            "[&R] ((a:1,b:1):1,(c:1,(d:1,x:1):1):1,f:1);",
        ],
        {},
        ["tree 1", "'x'", "same tips"],
    ),
    "duplicate_tip": (
        ["[&R] ((a:1,a:1):1,(c:1,(d:1,e:1):1):1,f:1);"],
        {},
        ["'a'", "more than once"],
    ),
    "unbalanced_parentheses": (
        ["[&R] ((a:1,b:1):1,(c:1,(d:1,e:1):1):1,f:1;"],
        {},
        ["trees.nwk", "cannot be read"],
    ),
    "burnin_leaves_nothing": (
        UNROOTED,
        {"root": "midpoint", "burnin": 3},
        ["burn-in", "leave no trees", "trees.burnin"],
    ),
    "empty_file": ([""], {}, ["trees.nwk", "empty"]),
    "tree_without_length": (
        [
            "[&R] ((a:1,b:1):1,(c:1,(d:1,e:1):1):1,f:1);",
            "[&R] ((a:0,b:0):0,(c:0,(d:0,e:0):0):0,f:0);",
        ],
        {},
        ["trees.nwk", "tree 1 has no length", "trees.min_branch_length"],
    ),
    "comment_never_closed": (
        [
            "[&R] ((a:1,b:1):1,(c:1,(d:1,e:1):1):1,f:1);",
            "[sample 2",
            "[&R] ((a:1,c:1):1,(b:1,(d:1,e:1):1):1,f:1);",
        ],
        {},
        ["trees.nwk", "line 2", "never closed"],
    ),
}


@pytest.mark.parametrize("case", list(TREE_ERRORS))
def test_tree_file_errors_name_the_file_the_tree_and_the_fix(tmp_path, case):
    """Cases 23-31, 45 and 46."""
    texts, trees, needles = TREE_ERRORS[case]
    cfg = _unrooted_workdir(tmp_path, **trees)
    (tmp_path / "data" / "trees.nwk").write_text("\n".join(texts) + "\n")
    stopped(only_prepare(tmp_path, cfg), *needles)


# --------------------------------------------------------------------------- case 32-42
# Trait tables and settings that cannot be used: stopped before any job runs (--dry-run).

GOOD_TABLE = "taxon,colour\na,red\nb,red\nc,blue\nd,blue\ne,red\nf,blue\n"
TABLE_ERRORS = {
    "states_differ_in_case": (
        "taxon,colour\na,Red\nb,red\nc,blue\nd,blue\ne,red\nf,blue\n",
        {},
        [
            "traits.csv",
            "'Red' (taxon 'a', line 2)",
            "'red' (taxon 'b', line 3)",
            "traits.order.colour",
        ],
    ),
    "constant_trait": (
        "taxon,colour\na,red\nb,red\nc,red\nd,red\ne,?\nf,red\n",
        {},
        ["traits.csv", "trait 'colour'", "only the state 'red'", "Drop it from traits.columns"],
    ),
    "column_missing": (
        GOOD_TABLE.replace("colour", "color"),
        {},
        ["traits.csv", "line 1", "no column 'colour'", "color"],
    ),
    "taxon_column_renamed": (
        GOOD_TABLE.replace("taxon", "species", 1),
        {},
        ["traits.csv", "no column 'taxon'", "species"],
    ),
    "duplicate_taxon": (GOOD_TABLE + "c,red\n", {}, ["traits.csv", "line 8", "'c'", "line 4"]),
    "ragged_row": (
        GOOD_TABLE.replace("c,blue", "c,blue,extra"),
        {},
        ["traits.csv", "line 4", "3 fields"],
    ),
    "state_not_in_order": (
        GOOD_TABLE,
        {
            "traits": {
                "file": "data/traits.csv",
                "columns": ["colour"],
                "order": {"colour": ["red", "green"]},
            }
        },
        ["traits.csv", "taxon 'c'", "line 4", "'blue'", "order"],
    ),
    "missing_code_in_a_state_list": (
        GOOD_TABLE.replace("c,blue", "c,blue|?"),
        {},
        ["traits.csv", "taxon 'c'", "line 4", "blue|?"],
    ),
    "header_only": ("taxon,colour\n", {}, ["traits.csv", "no rows"]),
    "bad_rooting_word": (
        GOOD_TABLE,
        {"trees": {"file": "data/trees.nwk", "root": "middle"}},
        ["trees.root"],
    ),
    "negative_minimum_length": (
        GOOD_TABLE,
        {"trees": {"file": "data/trees.nwk", "min_branch_length": -1}},
        ["trees.min_branch_length"],
    ),
    "summary_tree_misspelt": (
        GOOD_TABLE,
        {"ancestral": {"summary_tree": "majority"}},
        ["ancestral.summary_tree", "majority"],
    ),
}


@pytest.mark.parametrize("case", list(TABLE_ERRORS))
def test_table_and_setting_errors_stop_before_any_job(tmp_path, case):
    """Cases 32-43."""
    table, sections, needles = TABLE_ERRORS[case]
    (tmp_path / "data").mkdir()
    (tmp_path / "data" / "trees.nwk").write_text(
        "[&R] ((a:1,b:1):1,((c:1,d:1):0.5,(e:1,f:1):0.5):0.5);\n"
    )
    (tmp_path / "data" / "traits.csv").write_text(table)
    cfg = write_config(tmp_path, **sections)
    stopped(run_snakemake(tmp_path, cfg, "--dry-run"), *needles)


def test_taxon_names_that_differ_only_in_case_get_a_hint(tmp_path):
    """Case 44: the table writes 'A' where the trees have 'a'."""
    (tmp_path / "data").mkdir()
    (tmp_path / "data" / "trees.nwk").write_text(
        "[&R] ((a:1,b:1):1,((c:1,d:1):0.5,(e:1,f:1):0.5):0.5);\n"
    )
    (tmp_path / "data" / "traits.csv").write_text(GOOD_TABLE.replace("\na,", "\nA,"))
    cfg = write_config(tmp_path)
    stopped(
        run_snakemake(tmp_path, cfg, f"results/{RUN}/tables/data_check.tsv", cores=1),
        "traits.csv",
        "'a'",
        "The table has 'A' where the trees have 'a'",
        "absent_taxa",
    )


# --------------------------------------------------------------------------- issue 21, item 5
# Tree files of the exact shapes tree programs write: each reads to the trees, counts and
# lengths DendroPy reads (general-purpose reference library), and runs end to end.


def _dendropy_reading(path: Path, root) -> list:
    """(sorted tip labels, total length) per tree, read by DendroPy itself."""
    import dendropy

    schema = "nexus" if path.read_text().lstrip().upper().startswith("#NEXUS") else "newick"
    out = []
    for t in dendropy.TreeList.get(path=str(path), schema=schema, preserve_underscores=True):
        tips = sorted(nd.taxon.label for nd in t.leaf_node_iter())
        total = sum(nd.edge.length or 0.0 for nd in t.preorder_node_iter() if nd is not t.seed_node)
        out.append((tips, total))
    return out


@pytest.mark.parametrize("shape", list(SHAPES))
def test_real_shapes_read_as_dendropy_reads_them(tmp_path, shape):
    writer, name, root = SHAPES[shape]
    path = writer(tmp_path / name)
    theirs = _dendropy_reading(path, root)
    for fast in (True, False):
        ours = read_trees(path, root=root, fast=fast)
        assert len(ours) == len(theirs)
        for t, (tips, total) in zip(ours, theirs):
            assert sorted(t.tip_labels) == tips
            assert t.total_length == pytest.approx(total, rel=1e-12, abs=1e-15)
    if shape == "odd_length_digits":
        lengths = set(read_trees(path)[0].length[:-1])
        assert lengths == {1.0000001999999988, 9.99999993922529e-8}


@pytest.mark.slow  # one real run per shape (about 40 s each)
@pytest.mark.parametrize("shape", list(SHAPES))
def test_real_shapes_run_end_to_end(tmp_path, shape):
    writer, name, root = SHAPES[shape]
    (tmp_path / "data").mkdir()
    writer(tmp_path / "data" / name)
    colour = ["red", "blue", "red", "blue", "blue", "red", "blue", "red"]
    rows = ["taxon\tcolour"] + [f"{t}\t{c}" for t, c in zip(TAXA, colour)]
    (tmp_path / "data" / "traits.tsv").write_text("\n".join(rows) + "\n")
    cfg = write_config(
        tmp_path,
        trees={"file": f"data/{name}", "root": root, "per_job": 50},
        traits={"file": "data/traits.tsv", "columns": ["colour"]},
        models={"one": {"kind": "equal"}},
    )
    proc = run_snakemake(tmp_path, cfg)
    finished(proc, tmp_path)
    fits = tables(tmp_path)["fits"]
    assert fits["tree"].nunique() == len(read_trees(tmp_path / "data" / name, root=root))
    assert np.isfinite(fits["log_likelihood"]).all()
