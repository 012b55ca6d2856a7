"""Summary tree with ancestral state probabilities, and change counts across trees."""

import sys
from pathlib import Path

sys.path.insert(0, str(Path(snakemake.scriptdir).parent))  # noqa: F821

import json

import pandas as pd

from mkforest.data.traits import traits_from_json, written_names
from mkforest.data.trees import describe_rooting, parse_newick
from mkforest.jobs.analyses import analysis_setup
from mkforest.jobs.scripting import run_job
from mkforest.report import plots_ancestral, style
from mkforest.report.methods_branches import first_set


def main(smk):
    out = smk.output
    states = pd.read_csv(smk.input.states, sep="\t", dtype={"state": str, "clade": str})
    clades = pd.read_csv(smk.input.clades, sep="\t", dtype={"members": str, "clade": str})
    per_tree = pd.read_csv(smk.input.per_tree, sep="\t", dtype={"from_state": str, "to_state": str})
    # the figures show the first tree set, whose summary tree they draw (the tables carry every set)
    named = style.set_named(states)  # the set the figures show, named in their titles
    states, per_tree = first_set(states), first_set(per_tree)
    tree = parse_newick(Path(smk.input.tree).read_text().strip(), rooted=True)
    traits = traits_from_json(json.loads(Path(smk.input.traits).read_text()))
    names = written_names(smk.input.traits)
    setup = smk.params.setup
    pairs = {name: spec["traits"] for name, spec in setup["pairs"].items()}
    orders = {}
    folder = Path(out.trees)  # one folder: a tree of many tips is cut into pages
    folder.mkdir(parents=True, exist_ok=True)
    for analysis in smk.params.analyses:
        trait, models = analysis_setup(setup, analysis, traits)  # a pair: its joint trait
        orders[analysis] = list(trait.states)
        ordered = analysis not in pairs and plots_ancestral.is_ordered_trait(
            [m for m, _ in models.values()], trait.k
        )
        pages = plots_ancestral.iter_state_tree_pages(  # saved one at a time
            tree,
            states[states["analysis"] == analysis],
            clades,
            trait,
            analysis,
            ordered,
            rooting=describe_rooting(smk.params.rooting),
        )
        for suffix, fig in pages:
            style.name_tree_set(fig, named)
            style.show_written_names(fig, names)
            name = f"{analysis}{suffix}"
            plots_ancestral.save(fig, [folder / f"{name}.png", folder / f"{name}.svg"])
    pages = Path(out.changes)  # as many analyses a page as fit
    pages.mkdir(parents=True, exist_ok=True)
    for name, fig in plots_ancestral.change_pages(per_tree, pairs, orders).items():
        style.name_tree_set(fig, named)
        style.show_written_names(fig, names)
        plots_ancestral.save(fig, [pages / f"{name}.png", pages / f"{name}.svg"])
    classes = first_set(
        pd.read_csv(
            smk.input.classes,
            sep="\t",
            dtype={"state": str, "clade": str},
            keep_default_na=False,
            na_values=[""],
        )
    )
    if not smk.params.hidden:
        return
    folder = Path(out.class_trees[0])  # one folder: a tree of many tips is cut into pages
    folder.mkdir(parents=True, exist_ok=True)
    for analysis, models in smk.params.hidden.items():
        for model in models:
            rows = classes[(classes["analysis"] == analysis) & (classes["model"] == model)]
            pages = plots_ancestral.iter_class_tree_pages(
                tree, rows, clades, analysis, model, rooting=describe_rooting(smk.params.rooting)
            )
            for suffix, fig in pages:
                style.name_tree_set(fig, named)
                style.show_written_names(fig, names)
                name = f"{analysis}_{model}{suffix}"
                plots_ancestral.save(fig, [folder / f"{name}.png", folder / f"{name}.svg"])


run_job(snakemake, main)  # noqa: F821
