"""Plots of model support and rates across trees."""
import sys
from pathlib import Path

sys.path.insert(0, str(Path(snakemake.scriptdir).parent))  # noqa: F821

import pandas as pd

from mkforest.jobs.scripting import run_job
from mkforest.report import plots


def main(smk):
    text = {"model": str, "analysis": str, "from_state": str, "to_state": str, "same_as": str,
            "at_bound": str}
    fits = pd.read_csv(smk.input.fits, sep="\t", dtype=text, keep_default_na=False,
                       na_values=["", "nan", "NaN"])
    rates = pd.read_csv(smk.input.rates, sep="\t", dtype=text, keep_default_na=False,
                        na_values=["", "nan", "NaN"])
    support = pd.read_csv(smk.input.support, sep="\t", dtype=text, keep_default_na=False,
                          na_values=["", "nan", "NaN"])
    out = smk.output
    plots.save(plots.support_weights(fits, smk.params.criterion),
               [out.support_weights_png, out.support_weights_svg])
    plots.save(plots.support_heatmap(support), [out.support_heatmap_png, out.support_heatmap_svg])
    plots.save(plots.rates_across_trees(rates, support, smk.params.pairs),
               [out.rates_across_trees_png, out.rates_across_trees_svg])


run_job(snakemake, main)  # noqa: F821
