"""Figures of one trait pair: joint-state diagram and tests across trees."""
import sys
from pathlib import Path

sys.path.insert(0, str(Path(snakemake.scriptdir).parent))  # noqa: F821

import json

import pandas as pd

from mkforest.data.traits import traits_from_json
from mkforest.engine.pairs import pair_from_config
from mkforest.jobs.scripting import run_job
from mkforest.report.plots import save
from mkforest.report.plots_pairs import pair_diagram, pair_tests_figure


def main(smk):
    job = smk.params.job
    name = job["pair"]
    traits = traits_from_json(json.loads(Path(smk.input.traits).read_text()))
    pair = pair_from_config(name, job["config"]["pairs"][name], traits)
    rates = pd.read_csv(smk.input.rates, sep="\t")
    support = pd.read_csv(smk.input.support, sep="\t")
    tests = pd.read_csv(smk.input.tests, sep="\t")
    boot = pd.read_csv(smk.input.bootstrap, sep="\t")
    out = smk.output
    save(pair_diagram(pair, rates, support), [out.diagram_png, out.diagram_svg])
    save(pair_tests_figure(name, tests, boot), [out.tests_png, out.tests_svg])


run_job(snakemake, main)  # noqa: F821
