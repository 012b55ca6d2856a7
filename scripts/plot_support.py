"""Plots of model support and rates across trees."""
import sys
from pathlib import Path

sys.path.insert(0, str(Path(snakemake.scriptdir).parent))  # noqa: F821

import pandas as pd

from mkforest.jobs.scripting import run_job
from mkforest.report import plots


def main(smk):
    fits = pd.read_csv(smk.input.fits, sep="\t")
    rates = pd.read_csv(smk.input.rates, sep="\t")
    support = pd.read_csv(smk.input.support, sep="\t")
    out = smk.output
    plots.save(plots.support_weights(fits, smk.params.criterion),
               [out.support_weights_png, out.support_weights_svg])
    plots.save(plots.support_heatmap(support), [out.support_heatmap_png, out.support_heatmap_svg])
    plots.save(plots.rates_across_trees(rates),
               [out.rates_across_trees_png, out.rates_across_trees_svg])


run_job(snakemake, main)  # noqa: F821
