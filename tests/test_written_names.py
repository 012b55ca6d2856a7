"""Trait columns whose headers are not file-safe (issue 21, item 8): analysed under a safe
name (``Leaf_shape``), shown as written (``Leaf shape``) in every results table (a column
``<column>_as_written`` right after each trait-name column), every figure's text and the
methods text; file names keep the safe name.

Invented data: a table of 10 taxa whose spreadsheet headers hold spaces and brackets, on
random rooted trees with polytomies. The end-to-end tests are real Snakemake runs.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml
from conftest import random_newick
from figure_checks import all_text, overlaps
from workflow_helpers import run_snakemake

from mkforest.data.traits import (
    NAME_COLUMNS,
    read_traits,
    traits_from_json,
    traits_to_json,
    with_written_names,
    written_text,
)
from mkforest.report import plots, style

WRITTEN = {
    "Leaf_shape": "Leaf shape",
    "Flower_colour_main": "Flower colour (main)",
    "habit": "habit",  # already safe: shown as it is
}
N_TIPS = 10


def write_inputs(folder: Path, n_trees: int = 3) -> tuple:
    rng = np.random.default_rng(21)
    trees = folder / "trees.nwk"
    trees.write_text(
        "\n".join(random_newick(rng, N_TIPS, p_polytomy=0.2, p_zero=0.0) for _ in range(n_trees))
        + "\n"
    )
    rows = ["taxon,Leaf shape,Flower colour (main),habit"]
    for i in range(N_TIPS):
        leaf = ("flat", "round")[int(rng.random() < 0.5)] if i > 1 else ("flat", "round")[i]
        colour = ("pale", "dark")[int(rng.random() < 0.5)] if i > 1 else ("pale", "dark")[i]
        rows.append(f"t{i},{leaf},{colour},{('low', 'tall')[i % 2]}")
    table = folder / "traits.csv"
    table.write_text("\n".join(rows) + "\n")
    return trees, table


def config(work: Path, run: str, **extra) -> Path:
    trees, table = write_inputs(work)
    cfg = {
        "run": run,
        "seed": 3,
        "trees": {"file": str(trees), "burnin": 0, "per_job": 2},
        "traits": {
            "file": str(table),
            "taxon_column": "taxon",
            "columns": list(WRITTEN),
        },
        "models": {"one": {"kind": "equal"}, "free": {"kind": "unconstrained"}},
        "fitting": {"starts": 2},
        "ancestral": {"enabled": False},
        **extra,
    }
    path = work / "config.yaml"
    path.write_text(yaml.safe_dump(cfg, sort_keys=False))
    return path


def svg_text(path: Path) -> str:
    """Every text element of an SVG (figures keep text as text), entities decoded."""
    raw = " ".join(re.findall(r"<text[^>]*>(.*?)</text>", path.read_text(), flags=re.S))
    return raw.replace("&amp;", "&").replace("&lt;", "<").replace("&gt;", ">")


def check_tables(tables: Path) -> list:
    """Every table with a trait-name column has <column>_as_written right after it, holding
    the header as written; returns the (table, column) pairs checked."""
    checked = []
    for path in sorted(tables.glob("*.tsv")):
        frame = pd.read_csv(path, sep="\t", dtype=str, keep_default_na=False)
        columns = list(frame.columns)
        for col in NAME_COLUMNS:
            if col not in columns:
                continue
            assert columns[columns.index(col) + 1] == f"{col}_as_written", (path.name, col)
            for value, written in zip(frame[col], frame[f"{col}_as_written"]):
                assert written == WRITTEN.get(value, value), (path.name, col, value, written)
            checked.append((path.name, col))
    return checked


# --------------------------------------------------------------------------- units


def test_the_header_as_written_travels_through_the_prepared_traits(tmp_path):
    _, table = write_inputs(tmp_path)
    traits = read_traits(table, "taxon", list(WRITTEN))
    assert {n: t.written for n, t in traits.items()} == WRITTEN
    back = traits_from_json(traits_to_json(traits))
    assert {n: t.written for n, t in back.items()} == WRITTEN
    assert back["habit"].column == ""  # nothing changed, nothing recorded twice


def test_written_text_keeps_file_names_and_config_keys():
    text = (
        "### Leaf_shape\nWe analysed Leaf_shape and Flower_colour_main, habit. "
        "Figure: plots/rates_across_trees/Leaf_shape.png; key traits.order.Leaf_shape; "
        "Leaf_shapes and my_Leaf_shape are other words."
    )
    assert written_text(text, WRITTEN) == (
        "### Leaf shape\nWe analysed Leaf shape and Flower colour (main), habit. "
        "Figure: plots/rates_across_trees/Leaf_shape.png; key traits.order.Leaf_shape; "
        "Leaf_shapes and my_Leaf_shape are other words."
    )
    # a plain-word safe name (header 'wet?') may be a state label too: left as it is
    assert written_text("wet → dry (wet)", {"wet": "wet?"}) == "wet → dry (wet)"


def test_with_written_names_places_each_column_after_its_own():
    frame = pd.DataFrame(
        {
            "tree_set": ["a", "a", "a"],
            "trait_1": ["Leaf_shape", "habit", "Leaf_shape"],
            "trait_2": ["Flower_colour_main", "Leaf_shape", "habit"],
            "analysis": ["Leaf_shape", "a_pair", None],
            "p": [0.1, 0.2, 0.3],
        }
    )
    out = with_written_names(frame, WRITTEN)
    assert list(out.columns) == [
        "tree_set",
        "trait_1",
        "trait_1_as_written",
        "trait_2",
        "trait_2_as_written",
        "analysis",
        "analysis_as_written",
        "p",
    ]
    assert list(out["trait_1_as_written"]) == ["Leaf shape", "habit", "Leaf shape"]
    assert list(out["trait_2_as_written"]) == ["Flower colour (main)", "Leaf shape", "habit"]
    assert out["analysis_as_written"].iloc[1] == "a_pair"  # a pair keeps its own name
    assert pd.isna(out["analysis_as_written"].iloc[2])
    assert list(frame.columns)[1] == "trait_1"  # the input frame is left as it was


# --------------------------------------------------------------------------- end to end


def test_tables_figures_and_methods_show_the_headers_as_written(tmp_path):
    """A real run (fits, model support, figures, methods) on a table whose headers hold
    spaces and brackets."""
    cfg = config(tmp_path, "w")
    proc = run_snakemake(tmp_path, cfg)
    assert proc.returncode == 0, (proc.stdout + proc.stderr)[-3000:]
    out = tmp_path / "results" / "w"
    checked = check_tables(out / "tables")
    for name in ("fits.tsv", "rates.tsv", "model_support.tsv", "rate_summary.tsv"):
        assert (name, "analysis") in checked
    assert ("data_check.tsv", "trait") in checked
    # the figures: file names under the safe name, text as written
    rates = out / "plots" / "rates_across_trees"
    assert sorted(p.stem for p in rates.glob("*.svg")) == sorted(WRITTEN)
    text = svg_text(rates / "Flower_colour_main.svg")
    assert "Flower colour (main)" in text and "Flower_colour_main" not in text
    heat = svg_text(out / "plots" / "support_heatmap.svg")
    assert "Leaf shape" in heat and "Leaf_shape" not in heat
    weights = svg_text(out / "plots" / "support_weights.svg")
    assert "Flower colour (main)" in weights and "Flower_colour_main" not in weights
    # the same figures drawn here from the run's tables: the longer names clash with nothing
    fits = pd.read_csv(out / "tables" / "fits.tsv", sep="\t", dtype={"model": str})
    support = pd.read_csv(out / "tables" / "model_support.tsv", sep="\t", dtype={"model": str})
    for fig in (plots.support_heatmap(support), plots.support_weights(fits, "aicc")):
        style.show_written_names(fig, WRITTEN)
        assert overlaps(fig) == [], overlaps(fig)
        shown = " ".join(all_text(fig))
        assert "Flower colour (main)" in shown and "Flower_colour_main" not in shown
    methods = (out / "methods.md").read_text()
    assert "### Leaf shape" in methods and "### Flower colour (main)" in methods
    assert "Leaf shape (2 states" in methods
    assert not re.search(r"(?<![/.\w])Leaf_shape(?![\w/]|\.\w)", methods)


@pytest.mark.slow  # about 3 min on 2 shared cores: every stage
def test_every_stage_shows_the_headers_as_written(tmp_path):
    """Ancestral states, a pair, the all-pairs scan and Bayesian estimation on the same
    table: every table of each stage carries the written names, and their figures show
    them."""
    cfg = config(
        tmp_path,
        "all",
        ancestral={"enabled": True, "maps": 4},
        pairs={"leaf_flower": {"traits": ["Leaf_shape", "Flower_colour_main"]}},
        scan={"traits": "all", "jobs_per_chunk": 1},
        bayes={
            "enabled": True,
            "models": ["one"],
            "trees": 2,
            "chains": 2,
            "warmup": 60,
            "draws": 60,
            "saved_draws": 30,
        },
    )
    proc = run_snakemake(tmp_path, cfg, timeout=1500)
    assert proc.returncode == 0, (proc.stdout + proc.stderr)[-3000:]
    out = tmp_path / "results" / "all"
    checked = dict.fromkeys(t for t, _ in check_tables(out / "tables"))
    for name in (
        "ancestral_states.tsv",
        "transitions.tsv",
        "scan.tsv",
        "scan_per_tree.tsv",
        "posterior_summary.tsv",
        "bayes_model_support.tsv",
    ):
        assert name in checked, name
    scan = pd.read_csv(out / "tables" / "scan.tsv", sep="\t")
    assert "Flower colour (main)" in set(scan["trait_1_as_written"]) | set(
        scan["trait_2_as_written"]
    )
    plots = out / "plots"
    figures = {
        "scan.svg": ("Leaf shape", "Flower colour (main)"),
        "ancestral_trees/Leaf_shape.svg": ("Leaf shape",),
        "pairs/rates_by_state/leaf_flower.svg": ("Leaf shape", "Flower colour (main)"),
        "bayes/posterior_rates/Flower_colour_main.svg": ("Flower colour (main)",),
    }
    for name, shown in figures.items():
        text = svg_text(plots / name)
        for written in shown:
            assert written in text, (name, written)
        assert "Leaf_shape" not in text and "Flower_colour_main" not in text, name
    methods = (out / "methods.md").read_text()
    assert "Flower colour (main)" in methods
