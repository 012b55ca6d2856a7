"""`mkforest init`: the config it writes for the user's files runs without edits
through the real workflow (demo-shaped data, mismatched taxa, unrooted trees),
and what it reports about the files is right."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import dendropy
import pandas as pd
import pytest
import yaml
from workflow_helpers import REPO, run_snakemake

from mkforest.demo import make_demo
from mkforest.errors import InputError
from mkforest.jobs.analyses import check_config
from mkforest.starter import starting_config, survey_trees

MKFOREST = str(Path(sys.executable).with_name("mkforest"))


def init(cwd: Path, *args):
    return subprocess.run(
        [MKFOREST, "init", *map(str, args)], cwd=cwd, capture_output=True, text=True, timeout=300
    )


def demo_data(folder: Path, n_tips: int = 14, n_trees: int = 4, columns=None) -> Path:
    """Demo-shaped data (the demo's generator, smaller); ``columns`` keeps only those traits."""
    make_demo(folder, n_tips=n_tips, n_trees=n_trees, seed=5)
    if columns:
        table = folder / "traits.tsv"
        rows = [line.split("\t") for line in table.read_text().splitlines()]
        keep = [0] + [rows[0].index(c) for c in columns]
        table.write_text("".join("\t".join(r[i] for i in keep) + "\n" for r in rows))
    return folder


def run_written_config(tmp_path: Path, config: Path, timeout: int = 600):
    proc = run_snakemake(tmp_path, config, timeout=timeout)
    assert proc.returncode == 0, (proc.stdout + proc.stderr)[-4000:]
    return yaml.safe_load(config.read_text())


def test_demo_data_config_runs_without_edits(tmp_path):
    data = demo_data(tmp_path / "data")
    proc = init(
        tmp_path,
        "--trees",
        data / "trees.nex",
        "--traits",
        data / "traits.tsv",
        "--output",
        "start.yaml",
    )
    assert proc.returncode == 0, proc.stderr
    out = proc.stdout.splitlines()
    # the one command to run next, and the summary of what was found
    assert out[-1] == f"make -C {REPO} run CONFIG={tmp_path / 'start.yaml'}"
    assert out[0].startswith(f"trees   {data / 'trees.nex'}: 4 tree(s), 14 tips, rooted")
    cfg = run_written_config(tmp_path, tmp_path / "start.yaml")
    assert cfg["run"] == "start" and cfg["ancestral"]["enabled"] is True
    fits = pd.read_csv(tmp_path / "results/start/tables/fits.tsv", sep="\t")
    assert set(fits["analysis"]) == set(cfg["traits"]["columns"])
    assert {"one_rate", "free"} <= set(fits["model"])
    assert (tmp_path / "results/start/tables/ancestral_states.tsv").is_file()
    # the pairs example is commented out; uncommented, it names two real columns and passes
    # the workflow's own check against the trait table
    lines = (tmp_path / "start.yaml").read_text().splitlines()
    start = lines.index("# pairs:")
    end = lines.index("pairs: {}")
    block = [ln[2:] for ln in lines[start:end]]
    with_pair = check_config(
        yaml.safe_load("\n".join(lines[:start] + block + lines[end + 1 :])), "uncommented"
    )
    (pair,) = with_pair["pairs"].values()
    assert len(set(pair["traits"])) == 2 and set(pair["traits"]) <= set(cfg["traits"]["columns"])


@pytest.mark.slow  # the full demo: 90 species, 120 trees, six traits, ancestral maps
def test_full_demo_data_config_runs_without_edits(tmp_path):
    make_demo(tmp_path / "data")
    proc = init(
        tmp_path, "--trees", tmp_path / "data/trees.nex", "--traits", tmp_path / "data/traits.tsv"
    )
    assert proc.returncode == 0, proc.stderr
    cfg = run_written_config(tmp_path, tmp_path / "my_config.yaml", timeout=3600)
    header = (tmp_path / "data/traits.tsv").read_text().splitlines()[0].split("\t")
    assert cfg["traits"]["columns"] == header[1:]  # every trait column of the table, in order
    assert "lip" in cfg["traits"]["columns"]  # the demo's trait simulated on unit lengths
    fits = pd.read_csv(tmp_path / "results/my_config/tables/fits.tsv", sep="\t")
    assert fits["tree"].nunique() == 120
    assert set(fits.loc[fits["analysis"] == "size", "model"]) == {"one_rate", "mirrored", "free"}


def test_mismatched_taxa_config_runs_and_lists_them(tmp_path):
    data = demo_data(tmp_path / "data", columns=["glow", "habitat"])
    table = data / "traits.tsv"
    lines = table.read_text().splitlines()
    dropped = [lines[2].split("\t")[0], lines[5].split("\t")[0]]
    extra = "Lumasta_nowhere\t" + "\t".join(["?"] * (len(lines[0].split("\t")) - 1))
    table.write_text(
        "\n".join([ln for ln in lines if ln.split("\t")[0] not in dropped] + [extra]) + "\n"
    )
    proc = init(tmp_path, "--trees", data / "trees.nex", "--traits", table)
    assert proc.returncode == 0, proc.stderr
    assert "2 in the trees only -> absent_taxa: missing" in proc.stdout
    assert "1 in the table only" in proc.stdout
    text = (tmp_path / "my_config.yaml").read_text()
    assert "absent_taxa: missing" in text
    for taxon in dropped + ["Lumasta_nowhere"]:
        assert taxon in text
    run_written_config(tmp_path, tmp_path / "my_config.yaml")
    check = pd.read_csv(tmp_path / "results/my_config/tables/data_check.tsv", sep="\t")
    only_tree = check[check["item"] == "taxa_in_trees_only"]
    assert set(only_tree["value"]) == {2}


def _unrooted_copy(src: Path, dst: Path) -> None:
    """The trees with their root removed (a basal trichotomy), written as [&U] Newick."""
    trees = dendropy.TreeList.get(path=str(src), schema="nexus", preserve_underscores=True)
    for t in trees:
        t.is_rooted = False
        t.deroot()
    trees.write(path=str(dst), schema="newick", unquoted_underscores=True, suppress_rooting=False)


def test_unrooted_trees_are_reported_and_rooted_so_the_config_runs(tmp_path):
    data = demo_data(tmp_path / "data", columns=["glow", "habitat"])
    _unrooted_copy(data / "trees.nex", data / "unrooted.nwk")
    # the workflow itself refuses these trees as written (the check init answers)
    survey = survey_trees(data / "unrooted.nwk")
    assert survey.unrooted == [0, 1, 2, 3]
    proc = init(tmp_path, "--trees", data / "unrooted.nwk", "--traits", data / "traits.tsv")
    assert proc.returncode == 0, proc.stderr
    assert "4 unrooted -> root: midpoint" in proc.stdout
    text = (tmp_path / "my_config.yaml").read_text()
    assert "4 of 4 UNROOTED" in text and "outgroup" in text
    cfg = run_written_config(tmp_path, tmp_path / "my_config.yaml")
    assert cfg["trees"]["root"] == "midpoint"
    assert (tmp_path / "results/my_config/tables/fits.tsv").is_file()


# --------------------------------------------------------------------------- what init reads


def test_ultrametric_agrees_with_dendropy(tmp_path):
    """Reference: DendroPy's Tree.calc_node_ages refuses a tree whose tips are not
    equally far from the root (general-purpose library)."""
    data = demo_data(tmp_path / "data")
    for name, schema in (("trees.nex", "nexus"), ("true_tree.nwk", "newick")):
        ours = survey_trees(data / name)
        for i, t in enumerate(dendropy.TreeList.get(path=str(data / name), schema=schema)):
            try:
                t.calc_node_ages(ultrametricity_precision=1e-3 * t.max_distance_from_root())
                theirs = True
            except ValueError:
                theirs = False
            assert (i not in ours.not_ultrametric) == theirs, (name, i)
    assert survey_trees(data / "true_tree.nwk").not_ultrametric == []
    assert survey_trees(data / "trees.nex").not_ultrametric  # the demo sample is perturbed


def _table(path: Path, rows: list) -> Path:
    path.write_text("\n".join(",".join(r) for r in rows) + "\n")
    return path


def test_odd_table_columns_are_left_out_with_reasons(tmp_path):
    trees = tmp_path / "t.nwk"
    trees.write_text("((a:1,b:1):1,(c:1,(d:0.5,e:0.5):1.5):0);\n")
    rows = [
        ["species", "colour", "note", "all_same", "size"],
        ["a", "red", "n1", "x", "small"],
        ["b", "blue", "n2", "x", "unknown"],
        ["c", "red", "n3", "x", "large"],
        ["d", "blue", "n4", "x", "medium"],
        ["e", "N/A", "n5", "x", "small"],
        ["f", "red", "n6", "x", "large"],
        ["g", "red", "n7", "x", "large"],
        ["h", "red", "n8", "x", "medium"],
        ["i", "red", "n9", "x", "small"],
    ]
    starter = starting_config(trees, _table(tmp_path / "t.csv", rows), base=tmp_path)
    cfg = yaml.safe_load(starter.text)
    # no 'taxon' column: the one matching the tree tips is chosen
    assert cfg["traits"]["taxon_column"] == "species"
    assert cfg["traits"]["columns"] == ["colour", "size"]
    assert "N/A" in cfg["traits"]["missing"] and "unknown" in cfg["traits"]["missing"]
    assert "note: 9 distinct values" in starter.text and "left out: only state 'x'" in starter.text
    # the three-state trait gets the symmetric model and an ordered-chain example that
    # proposes no order for words (sorted words are no scale)
    assert cfg["models"]["mirrored"]["applies_to"] == ["size"]
    assert '#     "<first> -> <second> -> ... -> <last>": up' in starter.text
    assert "large -> medium -> small" not in starter.text and "size_stepwise" not in cfg["models"]
    # rows f, g, h and i are in no tree: listed
    assert "4 row(s) of the table are in no tree" in starter.text


def test_misspelt_taxon_column_and_missing_lengths(tmp_path):
    trees = tmp_path / "t.nwk"
    trees.write_text("((a,b),(c,d));\n")
    table = _table(
        tmp_path / "t.csv",
        [["taxon", "colour"], ["a", "red"], ["b", "blue"], ["c", "red"], ["d", "blue"]],
    )
    with pytest.raises(InputError, match="no column 'taxa'.*Did you mean 'taxon'"):
        starting_config(trees, table, "taxa", base=tmp_path)
    starter = starting_config(trees, table, base=tmp_path)
    # no length anywhere: every model with branches: unit, and the run goes through
    assert "branch lengths: none in any tree" in starter.text
    assert "The run will stop" not in starter.text
    cfg = yaml.safe_load(starter.text)
    assert {m["branches"] for m in cfg["models"].values()} == {"unit"}
    # lengths on some branches only: the run would stop, and the comment says how to go on
    trees.write_text("((a:1,b),(c:1,d:2));\n")
    starter = starting_config(trees, table, base=tmp_path)
    words = " ".join(starter.text.replace("#", " ").split())  # comments wrap at 92 characters
    assert "MISSING on some branches of 1 tree(s)" in words and "The run will stop" in words


def test_init_refuses_to_replace_a_file(tmp_path):
    data = demo_data(tmp_path / "data", n_tips=8, n_trees=2)
    (tmp_path / "my_config.yaml").write_text("mine\n")
    proc = init(tmp_path, "--trees", data / "trees.nex", "--traits", data / "traits.tsv")
    assert proc.returncode == 2
    assert (
        proc.stderr.strip().splitlines()[-1].startswith("mkforest: error: 'my_config.yaml' exists")
    )
    assert (tmp_path / "my_config.yaml").read_text() == "mine\n"


def test_make_run_calls_the_workflow_with_the_config():
    dry = subprocess.run(
        ["make", "-s", "-n", "-C", str(REPO), "run", "CONFIG=my.yaml", "ARGS=--dry-run"],
        capture_output=True,
        text=True,
        timeout=60,
    )
    assert dry.returncode == 0, dry.stderr
    assert (
        ".venv/bin/snakemake --profile profiles/laptop --configfile my.yaml --dry-run"
        in dry.stdout.splitlines()
    )
    bare = subprocess.run(
        ["make", "-s", "-C", str(REPO), "run"], capture_output=True, text=True, timeout=60
    )
    assert bare.returncode != 0 and "usage: make run CONFIG=my_config.yaml" in bare.stdout


def test_columns_the_workflow_would_refuse_are_left_out_and_zero_lengths_reported(
    tmp_path, monkeypatch
):
    trees = tmp_path / "t.nwk"
    trees.write_text("((a:1,b:0):1,(c:1,d:1):1);\n")
    table = _table(
        tmp_path / "t.csv",
        [
            ["taxon", "colour", "shape"],
            ["a", "Red", "round"],
            ["b", "red", "flat"],
            ["c", "blue", "round"],
            ["d", "blue", "flat"],
        ],
    )
    starter = starting_config(trees, table, base=tmp_path)
    cfg = yaml.safe_load(starter.text)
    assert cfg["traits"]["columns"] == ["shape"]
    words = " ".join(starter.text.replace("#", " ").split())  # comments wrap at 92 characters
    assert "left out: trait table" in words and "differ only in case" in words
    assert "left out 'colour' (the workflow would refuse it)" in starter.summary[1]
    assert "zero-length branches: in 1 of 1 tree(s)" in words
    monkeypatch.chdir(tmp_path)  # the config's paths are relative to the working folder
    assert check_config(cfg, "init")["traits"]["columns"] == ["shape"]
