"""Figures of one trait pair: rates in each state of the other trait, joint-rate grid,
tests across trees."""

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
from mkforest.report.plots_pairs import joint_rate_grid, pair_tests_figure, rates_by_state

TEXT = {
    "model": str,
    "analysis": str,
    "from_state": str,
    "to_state": str,
    "same_as": str,
    "at_bound": str,
}


def main(smk):
    job = smk.params.job
    name = job["pair"]
    traits = traits_from_json(json.loads(Path(smk.input.traits).read_text()))
    spec = job["config"]["pairs"][name]
    pair = pair_from_config(name, spec, traits)
    models = {h: m for h, (m, _) in pair_models(name, spec, pair).items()}
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
    out = smk.output
    for fig, paths in (
        (
            rates_by_state(pair, rates, support, models),
            [out.rates_by_state_png, out.rates_by_state_svg],
        ),
        (joint_rate_grid(pair, rates, support, models), [out.joint_rates_png, out.joint_rates_svg]),
        (pair_tests_figure(name, tests, boot), [out.tests_png, out.tests_svg]),
    ):
        style.name_tree_set(fig, named)
        style.show_written_names(fig, written_names(smk.input.traits))
        save(fig, paths)


run_job(snakemake, main)  # noqa: F821
