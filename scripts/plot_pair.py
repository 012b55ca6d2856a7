"""Figures of every trait pair: rates in each state of the other trait, joint-rate grid,
tests across trees; one folder per kind, one figure (or its pages) per pair."""

import sys
from pathlib import Path

sys.path.insert(0, str(Path(snakemake.scriptdir).parent))  # noqa: F821

import json

import pandas as pd

from mkforest.data.traits import traits_from_json, written_names
from mkforest.engine.pairs import pair_from_config, pair_models
from mkforest.jobs.scripting import run_job
from mkforest.report import style
from mkforest.report.methods_branches import first_set
from mkforest.report.plots import save
from mkforest.report.plots_pairs import joint_rate_pages, pair_test_pages, rates_by_state_pages

TEXT = {
    "model": str,
    "analysis": str,
    "from_state": str,
    "to_state": str,
    "same_as": str,
    "at_bound": str,
}


def main(smk):
    traits = traits_from_json(json.loads(Path(smk.input.traits).read_text()))
    rates = pd.read_csv(
        smk.input.rates, sep="\t", dtype=TEXT, keep_default_na=False, na_values=["", "nan", "NaN"]
    )
    support = pd.read_csv(
        smk.input.support, sep="\t", dtype=TEXT, keep_default_na=False, na_values=["", "nan", "NaN"]
    )
    tests = pd.read_csv(smk.input.tests, sep="\t")
    boot = pd.read_csv(smk.input.bootstrap, sep="\t")
    # the figures show the first tree set, named in their titles (the tables carry every set)
    named = style.set_named(rates)
    rates, support, tests, boot = (first_set(t) for t in (rates, support, tests, boot))
    names = written_names(smk.input.traits)
    folders = {kind: Path(smk.output[kind]) for kind in ("rates_by_state", "joint_rates", "tests")}
    for folder in folders.values():
        folder.mkdir(parents=True, exist_ok=True)
    for name, spec in smk.params.pairs.items():
        pair = pair_from_config(name, spec, traits)
        models = {h: m for h, (m, _) in pair_models(name, spec, pair).items()}
        for kind, pages in (
            ("rates_by_state", rates_by_state_pages(pair, rates, support, models)),
            ("joint_rates", joint_rate_pages(pair, rates, support, models)),
            ("tests", pair_test_pages(name, tests, boot)),
        ):
            for page, fig in pages.items():
                style.name_tree_set(fig, named)
                style.show_written_names(fig, names)
                save(fig, [folders[kind] / f"{page}.png", folders[kind] / f"{page}.svg"])


run_job(snakemake, main)  # noqa: F821
