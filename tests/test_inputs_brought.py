"""Inputs as users bring them (issue 21): bootstrap trees without lengths, a sampler's
output with its starting tree, what the trees are, polymorphic cells, names with spaces
against underscores, and the first messages of a run.

Invented files of these shapes (tests/catalogue_inputs.py); no real data. The two
`init`-to-results runs are real Snakemake runs on 4 trees of 8 tips.
"""

from __future__ import annotations

import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml
from catalogue_inputs import TAXA, posterior_nexus, rename, unrooted
from conftest import random_newick
from workflow_helpers import run_snakemake

from mkforest.data.traits import combined_states
from mkforest.data.trees import NO_LENGTHS_FIX, read_trees, tree_file_features
from mkforest.errors import InputError
from mkforest.jobs.analyses import check_config
from mkforest.starter import starting_config, survey_trees

MKFOREST = str(Path(sys.executable).with_name("mkforest"))
NAMES = [t.replace(" ", "_").replace("'", "") for t in TAXA]  # unquoted Newick names


def init(cwd: Path, *args):
    return subprocess.run(
        [MKFOREST, "init", *map(str, args)], cwd=cwd, capture_output=True, text=True, timeout=300
    )


def strip_lengths(newick: str) -> str:
    return re.sub(r":[-0-9.eE]+", "", newick)


def bootstrap_file(path: Path, n_trees: int = 4, lengths: bool = False, seed: int = 2) -> Path:
    """Bare unrooted Newick trees, one per line, with support values on internal nodes and
    (by default) no branch lengths, as bootstrap trees are often written."""
    rng = np.random.default_rng(seed)
    lines = []
    for _ in range(n_trees):
        nwk = random_newick(rng, len(NAMES), p_polytomy=0.0, p_zero=0.0)
        nwk = unrooted(rename(nwk, dict(enumerate(NAMES))))
        nwk = re.sub(r"\)(?=[:,);])", lambda m: f"){int(rng.integers(50, 101))}", nwk)
        lines.append(nwk if lengths else strip_lengths(nwk))
    path.write_text("\n".join(lines) + "\n")
    return path


def trait_table(path: Path, names=TAXA, sep=",") -> Path:
    rows = ["taxon,shell,spines"]
    shell = ["smooth", "ridged", "smooth", "ridged", "ridged", "smooth", "ridged", "smooth"]
    spines = ["0", "1", "2", "1", "0", "2", "1", "0"]
    rows += [f'"{n}",{a},{b}' for n, a, b in zip(names, shell, spines)]
    path.write_text("\n".join(rows).replace(",", sep) + "\n")
    return path


# --------------------------------------------------------------------------- item 1


def test_bootstrap_trees_without_lengths_run_from_init_to_the_end(tmp_path):
    """Issue 21, items 1 and 3: unrooted bootstrap trees with support values and no branch
    lengths: init writes branches: unit on every model, a midpoint on unit lengths and
    trees.kind bootstrap; the config runs as written; the methods text says bootstrap trees.
    Red before the fix: init wrote 'BRANCH LENGTHS MISSING (the run will stop)' and the
    run stopped at prepare_trees."""
    data = tmp_path / "data"
    data.mkdir()
    trees = bootstrap_file(data / "boot.tre")
    table = trait_table(data / "traits.csv", NAMES)
    proc = init(tmp_path, "--trees", trees, "--traits", table)
    assert proc.returncode == 0, proc.stderr
    assert "no branch lengths -> branches: unit" in proc.stdout
    text = (tmp_path / "my_config.yaml").read_text()
    cfg = yaml.safe_load(text)
    assert {m.get("branches") for m in cfg["models"].values()} == {"unit"}
    assert cfg["trees"]["root"] == "midpoint" and cfg["trees"]["kind"] == "bootstrap"
    words = " ".join(text.replace("#", " ").split())
    assert "counted in branches" in words and "support values (ignored)" in words
    proc = run_snakemake(tmp_path, tmp_path / "my_config.yaml", timeout=900)
    assert proc.returncode == 0, (proc.stdout + proc.stderr)[-3000:]
    out = tmp_path / "results" / "my_config"
    fits = pd.read_csv(out / "tables" / "fits.tsv", sep="\t")
    assert set(fits["branches"]) == {"unit"} and fits["tree"].nunique() == 4
    assert np.isfinite(fits["log_likelihood"]).all()
    check = pd.read_csv(out / "tables" / "data_check.tsv", sep="\t")
    row = check[check["item"] == "trees_without_lengths"]
    assert list(row["value"]) == [4]
    methods = (out / "methods.md").read_text()
    assert "4 bootstrap trees" in methods and "posterior sample" not in methods
    assert "one unit of length" in methods


@pytest.mark.parametrize("root", [None, "midpoint", {"outgroup": ["Brun_a"]}])
def test_trees_without_lengths_stop_with_one_way_forward(tmp_path, root):
    """Issue 21, item 1: whatever the rooting, a tree without lengths under a model that
    needs them stops with the same sentence (branches: unit), never first with 'use an
    outgroup' and then with another stop. Red before: midpoint asked for an outgroup, and
    the outgroup then stopped at 'the branch above ... has no length'."""
    trees = bootstrap_file(tmp_path / "boot.tre", n_trees=2)
    with pytest.raises(InputError) as err:
        read_trees(trees, root=root)
    assert NO_LENGTHS_FIX in str(err.value) and "tree 0" in str(err.value)
    # with every model on unit lengths the same file reads (rooted as asked), each branch
    # one unit long; unrooted and not rooted, it stops as any unrooted tree does
    if root is None:
        with pytest.raises(InputError, match="unrooted"):
            read_trees(trees, root=root, no_lengths="unit")
        return
    got = read_trees(trees, root=root, no_lengths="unit")
    assert len(got) == 2
    lengths = got[0].length[:-1]
    assert set(np.round(lengths, 12)) <= {0.5, 1.0, 0.0}


# --------------------------------------------------------------------------- item 2


def chain_file(path: Path, start: str = "equal", name: str = "STATE_", n_trees: int = 10):
    """A sampler's NEXUS output: trees named STATE_0, STATE_1000, ..., the first the chain's
    starting tree (every branch one length, or lengths near 1e-7)."""
    rng = np.random.default_rng(4)
    texts = [random_newick(rng, 8, p_polytomy=0.0, p_zero=0.0) for _ in range(n_trees)]
    value = {"equal": "0.1", "tiny": "9.99999993922529E-8"}[start]
    texts[0] = re.sub(r":[-0-9.eE]+", f":{value}", texts[0])
    posterior_nexus(path, texts, TAXA)
    if name != "STATE_":
        path.write_text(
            re.sub(r"STATE_(\d+)", lambda m: f"{name}{int(m.group(1)) * 250}", path.read_text())
        )
    return path


@pytest.mark.parametrize("start,name", [("equal", "STATE_"), ("tiny", "gen.")])
def test_init_proposes_a_burnin_for_a_samplers_output(tmp_path, start, name):
    """Issue 21, item 2. Red before: burnin 0 whatever the file."""
    trees = chain_file(tmp_path / "chain.nex", start, name)
    table = trait_table(tmp_path / "traits.csv")
    survey = survey_trees(trees)
    assert survey.chain[:2] == ([0, 1000] if name == "STATE_" else [0, 250000])
    assert survey.first_start
    starter = starting_config(trees, table, base=tmp_path)
    cfg = yaml.safe_load(starter.text)
    assert cfg["trees"]["burnin"] == 0.1 and cfg["trees"]["kind"] == "posterior"
    words = " ".join(starter.text.replace("#", " ").split())
    assert "numbered chain states" in words and "starting tree" in words
    assert "burn-in 0.1 proposed" in starter.summary[0]


@pytest.mark.slow  # about 2.5 min on 2 shared cores (init turns ancestral maps on)
def test_samplers_output_runs_from_init_to_the_end(tmp_path):
    """Issue 21, items 2 and 3: a sampler's NEXUS output (STATE_ names, its starting tree
    first, quoted names with spaces, a table writing them with underscores) runs from
    init to the end with no edits; the starting tree is dropped as burn-in."""
    (tmp_path / "data").mkdir()
    trees = chain_file(tmp_path / "data" / "run1.nex", "equal", n_trees=10)
    table = trait_table(tmp_path / "data" / "traits.csv", NAMES)
    proc = init(tmp_path, "--trees", trees, "--traits", table)
    assert proc.returncode == 0, proc.stderr
    cfg = yaml.safe_load((tmp_path / "my_config.yaml").read_text())
    assert cfg["trees"]["burnin"] == 0.1 and cfg["trees"]["kind"] == "posterior"
    proc = run_snakemake(tmp_path, tmp_path / "my_config.yaml", timeout=900)
    assert proc.returncode == 0, (proc.stdout + proc.stderr)[-3000:]
    out = tmp_path / "results" / "my_config"
    fits = pd.read_csv(out / "tables" / "fits.tsv", sep="\t")
    assert sorted(fits["tree"].unique()) == list(range(1, 10))  # tree 0, the start, dropped
    check = pd.read_csv(out / "tables" / "data_check.tsv", sep="\t")
    assert "first_tree_looks_like_chain_start" not in set(check["item"])
    assert "trees of a posterior sample" in (out / "methods.md").read_text()


def test_data_check_names_a_kept_first_tree_that_looks_like_a_chain_start(tmp_path):
    """Issue 21, item 2: with burnin 0 the data check has a row for the starting tree.
    Red before: no such row."""
    (tmp_path / "data").mkdir()
    chain_file(tmp_path / "data" / "chain.nex", "tiny", n_trees=3)
    trait_table(tmp_path / "data" / "traits.csv")
    cfg = tmp_path / "config.yaml"
    cfg.write_text(
        yaml.safe_dump(
            {
                "run": "c",
                "trees": {"file": "data/chain.nex", "per_job": 10},
                "traits": {"file": "data/traits.csv", "columns": ["shell"]},
                "models": {"one": {"kind": "equal"}},
                "ancestral": {"enabled": False},
            }
        )
    )
    proc = run_snakemake(tmp_path, cfg, "results/c/tables/data_check.tsv", cores=1)
    assert proc.returncode == 0, (proc.stdout + proc.stderr)[-3000:]
    check = pd.read_csv(tmp_path / "results/c/tables/data_check.tsv", sep="\t")
    row = check[check["item"] == "first_tree_looks_like_chain_start"]
    assert list(row["tree"]) == [0]
    assert "trees.burnin" in row["detail"].iloc[0] and "1e-07" in row["detail"].iloc[0]


# --------------------------------------------------------------------------- item 6


def test_polymorphic_cells_are_recognised(tmp_path):
    """Issue 21, item 6: cells 0/1 beside 0 and 1: init sets the separator '/' and reads
    three states, not six. Red before: states 0, 0/1, 0/2, 1, 1/2, 2."""
    trees = tmp_path / "t.nwk"
    trees.write_text("[&R] ((a:1,b:1):1,((c:1,d:1):0.5,(e:1,(f:1,g:1):0.5):0.5):0.5);\n")
    table = tmp_path / "t.csv"
    table.write_text("taxon,teeth\na,0\nb,0/1\nc,1\nd,2\ne,1/2\nf,0/2\ng,2\n")
    starter = starting_config(trees, table, base=tmp_path)
    cfg = yaml.safe_load(starter.text)
    assert cfg["traits"]["separator"] == "/"
    assert "teeth: 0 1, 1 1, 2 2; missing 0; ambiguous 3" in starter.text
    assert combined_states(("0", "0/1", "0/2", "1", "1/2", "2")) == {"/": ["0/1", "0/2", "1/2"]}
    assert combined_states(("0", "1", "2")) == {}
    assert combined_states(("a/b", "c")) == {}  # parts that are no states of their own


def test_a_run_warns_when_states_look_like_combinations(tmp_path):
    """Issue 21, item 6: a run with separator '|' and cells 0/1 names the column, the cells
    and the setting in data_check.tsv. Red before: nothing warned."""
    (tmp_path / "data").mkdir()
    (tmp_path / "data" / "t.nwk").write_text(
        "[&R] ((a:1,b:1):1,((c:1,d:1):0.5,(e:1,(f:1,g:1):0.5):0.5):0.5);\n"
    )
    (tmp_path / "data" / "t.csv").write_text("taxon,teeth\na,0\nb,0/1\nc,1\nd,2\ne,1/2\nf,0\ng,2\n")
    cfg = tmp_path / "config.yaml"
    cfg.write_text(
        yaml.safe_dump(
            {
                "run": "p",
                "trees": {"file": "data/t.nwk"},
                "traits": {"file": "data/t.csv", "columns": ["teeth"]},
                "models": {"one": {"kind": "equal"}},
                "ancestral": {"enabled": False},
            }
        )
    )
    proc = run_snakemake(tmp_path, cfg, "results/p/tables/data_check.tsv", cores=1)
    assert proc.returncode == 0, (proc.stdout + proc.stderr)[-3000:]
    check = pd.read_csv(tmp_path / "results/p/tables/data_check.tsv", sep="\t")
    row = check[check["item"] == "states_look_combined"]
    assert list(row["trait"]) == ["teeth"] and list(row["value"]) == [2]
    assert "0/1, 1/2" in row["detail"].iloc[0] and "traits.separator: '/'" in row["detail"].iloc[0]


# --------------------------------------------------------------------------- item 7


def test_spaces_against_underscores_match(tmp_path):
    """Issue 21, item 7: the table writes 'Vexa minor' where the unquoted tips are
    'Vexa_minor': init matches them and says so, and the run matches them and lists them
    in the data check. Red before: 'no taxon ... is a tip'."""
    (tmp_path / "data").mkdir()
    trees = bootstrap_file(tmp_path / "data" / "t.nwk", n_trees=2, lengths=True)
    table = trait_table(tmp_path / "data" / "t.csv", [n.replace("_", " ") for n in NAMES])
    starter = starting_config(trees, table, base=tmp_path)
    assert "8 matched (8 with underscores for spaces)" in starter.summary[2]
    cfg = yaml.safe_load(starter.text)
    cfg.update(models={"one": {"kind": "equal"}}, ancestral={"enabled": False}, run="s")
    (tmp_path / "config.yaml").write_text(yaml.safe_dump(cfg))
    proc = run_snakemake(tmp_path, tmp_path / "config.yaml", "results/s/tables/data_check.tsv")
    assert proc.returncode == 0, (proc.stdout + proc.stderr)[-3000:]
    check = pd.read_csv(tmp_path / "results/s/tables/data_check.tsv", sep="\t")
    row = check[check["item"] == "matched_with_underscores_for_spaces"]
    assert list(row["value"]) == [8] and "Vexa minor = Vexa_minor" in row["detail"].iloc[0]
    assert int(check.loc[check["item"] == "taxa_in_trees_only", "value"].max()) == 0


def test_names_that_still_differ_say_what_differs(tmp_path):
    """Issue 21, item 7: no name matches: the message says what differs (a suffix)."""
    trees = bootstrap_file(tmp_path / "t.nwk", n_trees=1, lengths=True)
    table = trait_table(tmp_path / "t.csv", [n + "_1" for n in NAMES])
    with pytest.raises(InputError, match=r"they differ in a suffix"):
        starting_config(trees, table, base=tmp_path)


# --------------------------------------------------------------------------- items 10, 11


def test_misspelt_trait_column_is_blamed_where_it_is_misspelt(tmp_path):
    """Issue 21, item 10: traits.columns says 'Symbiont' for the column 'Symbionts' and a
    model names 'Symbionts' right: no message tells the user to copy the typo into the
    model; one names the column in the table. Red before: 'models.free.applies_to names
    trait 'Symbionts' ... Did you mean 'Symbiont'?'."""
    table = tmp_path / "t.csv"
    table.write_text("taxon,Symbionts\na,yes\nb,no\nc,yes\n")
    raw = {
        "run": "m",
        "trees": {"file": str(bootstrap_file(tmp_path / "t.nwk", 1, lengths=True))},
        "traits": {"file": str(table), "columns": ["Symbiont"]},
        "models": {"free": {"kind": "unconstrained", "applies_to": ["Symbionts"]}},
    }
    with pytest.raises(InputError) as err:
        check_config(raw, "my.yaml")
    text = str(err.value)
    assert "Did you mean 'Symbiont'" not in text
    assert "'Symbionts', a column of the trait table" in text
    assert "no column 'Symbiont'" in text and "Did you mean 'Symbionts'?" in text


@pytest.mark.parametrize("key", ["trees", "traits"])
def test_missing_input_files_are_named_before_the_workflow_starts(tmp_path, key):
    """Issue 21, item 11: a tree file or trait table that does not exist stops the run
    with our sentence naming the key, before Snakemake builds its graph. Red before:
    Snakemake's MissingInputException in rule prepare_trees."""
    (tmp_path / "data").mkdir()
    bootstrap_file(tmp_path / "data" / "t.nwk", 2, lengths=True)
    trait_table(tmp_path / "data" / "t.csv", NAMES)
    cfg = {
        "run": "f",
        "trees": {"file": "data/t.nwk", "root": "midpoint"},
        "traits": {"file": "data/t.csv", "columns": ["shell"]},
        "models": {"one": {"kind": "equal"}},
    }
    cfg[key]["file"] = "data/nope.file"
    (tmp_path / "config.yaml").write_text(yaml.safe_dump(cfg))
    proc = run_snakemake(tmp_path, tmp_path / "config.yaml", "--dry-run")
    text = proc.stdout + proc.stderr
    assert proc.returncode == 2, text
    assert (
        f"mkforest: config file '{tmp_path / 'config.yaml'}': {key}.file 'data/nope.file' does not exist"
        in text
    )
    for wrapper in ("MissingInputException", "Traceback"):
        assert wrapper not in text, text


# --------------------------------------------------------------------------- items 9, 4


def test_init_guesses_an_ordered_chain_for_counts_and_one_rate_for_near_constant(
    tmp_path, monkeypatch
):
    """Issue 21, item 9: a 0-4 count gets an ordered chain (in numeric order), words
    (hook/rod/star) get none, a trait where one taxon differs gets one rate only. Red
    before: the ordered example came from the words, the count got none, and the
    near-constant trait got the every-rate-free model."""
    names = [f"t{i}" for i in range(12)]
    rng = np.random.default_rng(1)
    trees = tmp_path / "t.nwk"
    trees.write_text(random_newick(rng, 12, p_polytomy=0.0, p_zero=0.0) + "\n")
    count = ["0", "1", "2", "3", "4", "10", "0", "1", "2", "3", "4", "10"]
    form = ["hook", "rod", "star"] * 4
    rare = ["no"] * 11 + ["yes"]
    rows = ["taxon,count,form,rare"] + [
        f"{n},{a},{b},{c}" for n, a, b, c in zip(names, count, form, rare)
    ]
    (tmp_path / "t.csv").write_text("\n".join(rows) + "\n")
    starter = starting_config(trees, tmp_path / "t.csv", base=tmp_path)
    monkeypatch.chdir(tmp_path)  # the paths are written relative to the working folder
    cfg = check_config(yaml.safe_load(starter.text), "init")  # the workflow accepts it
    models = cfg["models"]
    assert cfg["traits"]["order"] == {"count": ["0", "1", "2", "3", "4", "10"]}
    assert models["count_stepwise"]["applies_to"] == ["count"]
    assert models["count_stepwise"]["transitions"] == {
        "0 -> 1 -> 2 -> 3 -> 4 -> 10": "up",
        "10 -> 4 -> 3 -> 2 -> 1 -> 0": "down",
    }
    assert "form_stepwise" not in models and "hook -> rod" not in starter.text
    for name, spec in models.items():
        if name != "one_rate":
            assert "rare" not in (spec.get("applies_to") or ["rare"]), name
    words = " ".join(starter.text.replace("#", " ").split())
    assert "Only one taxon differs from the rest in rare" in words


def test_init_says_which_file_features_it_met(tmp_path):
    """Issue 21, item 4: translate table, rooting tags, comments on nodes, quoted names,
    support values. Red before: none of them named."""
    trees = chain_file(tmp_path / "chain.nex", n_trees=3)
    text = trees.read_text().replace("):", ")95:", 1)
    trees.write_text(text)
    table = trait_table(tmp_path / "traits.csv")
    words = " ".join(starting_config(trees, table, base=tmp_path).text.replace("#", " ").split())
    for feature in (
        "a translate table",
        "rooting tags [&R]",
        "comments on nodes or trees such as [&...] (ignored)",
        "quoted names",
        "labels on internal nodes, such as support values (ignored)",
    ):
        assert feature in words, feature


@pytest.mark.parametrize(
    "shape,expected",
    [
        ("sampler_unrooted_translate", {"translate_table", "rooting_tags", "quoted_names"}),
        ("consensus_with_comments", {"rooting_tags", "node_comments", "quoted_names"}),
        ("bootstrap_with_lengths", {"internal_labels", "quoted_names"}),
        ("time_trees_with_rates", {"rooting_tags", "node_comments", "quoted_names"}),
    ],
)
def test_tree_file_features_of_the_catalogue_shapes(tmp_path, shape, expected):
    """Issue 21, item 4: what each catalogue shape holds besides its trees, and nothing
    else: braces, quotes and parentheses inside comments ('prob(percent)="100"') are no
    internal node label. What the files hold is known from how catalogue_inputs writes
    them."""
    from catalogue_inputs import SHAPES

    writer, name, _ = SHAPES[shape]
    text = writer(tmp_path / name).read_text()
    assert {item for item, _ in tree_file_features(text)} == expected
    assert tree_file_features("((a:1,b:1):1,c:2);\n") == []


def test_data_check_says_which_tree_file_features_were_met(tmp_path):
    """Issue 21, item 4: data_check.tsv has a row per feature of the tree file and what was
    done (support values and comments ignored). Red before: no such rows (only init said it)."""
    (tmp_path / "data").mkdir()
    trees = chain_file(tmp_path / "data" / "chain.nex", n_trees=3)
    trees.write_text(trees.read_text().replace("):", ")95:", 1))
    trait_table(tmp_path / "data" / "traits.csv")
    cfg = tmp_path / "config.yaml"
    cfg.write_text(
        yaml.safe_dump(
            {
                "run": "f",
                "trees": {"file": "data/chain.nex", "per_job": 10, "burnin": 1},
                "traits": {"file": "data/traits.csv", "columns": ["shell"]},
                "models": {"one": {"kind": "equal"}},
                "ancestral": {"enabled": False},
            }
        )
    )
    proc = run_snakemake(tmp_path, cfg, "results/f/tables/data_check.tsv", cores=1)
    assert proc.returncode == 0, (proc.stdout + proc.stderr)[-3000:]
    check = pd.read_csv(tmp_path / "results/f/tables/data_check.tsv", sep="\t")
    rows = check[check["trait"] == "(trees)"].set_index("item")["detail"]
    assert "translate table" in rows["file_translate_table"]
    assert "[&R]" in rows["file_rooting_tags"]
    assert "(ignored)" in rows["file_node_comments"]
    assert "support values (ignored)" in rows["file_internal_labels"]
    assert "quoted names" in rows["file_quoted_names"]


# --------------------------------------------------------------------------- item 8


def test_columns_with_spaces_are_analysed_under_a_safe_name(tmp_path):
    """Issue 21, item 8: spreadsheet columns with spaces are analysed under a name fit for
    files (Leaf_shape for 'Leaf shape'), shown beside the original in init's comments and
    the data check. Red before: such columns were left out."""
    (tmp_path / "data").mkdir()
    trees = bootstrap_file(tmp_path / "data" / "t.nwk", n_trees=2, lengths=True)
    table = tmp_path / "data" / "t.csv"
    shape = ["flat", "round"] * 4
    rows = ["taxon,Leaf shape,Spine count (adult)"] + [
        f"{n},{a},{b}" for n, a, b in zip(NAMES, shape, ["0", "1", "2", "1", "0", "2", "1", "0"])
    ]
    table.write_text("\n".join(rows) + "\n")
    starter = starting_config(trees, table, base=tmp_path)
    cfg = yaml.safe_load(starter.text)
    assert cfg["traits"]["columns"] == ["Leaf_shape", "Spine_count_adult"]
    assert "column 'Leaf shape' is analysed as Leaf_shape" in starter.text
    cfg.update(models={"one": {"kind": "equal"}}, ancestral={"enabled": False}, run="w")
    cfg["trees"]["root"] = "midpoint"
    (tmp_path / "config.yaml").write_text(yaml.safe_dump(cfg))
    proc = run_snakemake(tmp_path, tmp_path / "config.yaml", "results/w/tables/fits.tsv")
    assert proc.returncode == 0, (proc.stdout + proc.stderr)[-3000:]
    out = tmp_path / "results" / "w" / "tables"
    check = pd.read_csv(out / "data_check.tsv", sep="\t")
    row = check[check["item"] == "column"].set_index("trait")["detail"]
    assert row.to_dict() == {"Leaf_shape": "Leaf shape", "Spine_count_adult": "Spine count (adult)"}
    fits = pd.read_csv(out / "fits.tsv", sep="\t")
    assert set(fits["analysis"]) == {"Leaf_shape", "Spine_count_adult"}
