"""Plot of support for branch-length treatments and tree sets across trees."""

import sys
from pathlib import Path

sys.path.insert(0, str(Path(snakemake.scriptdir).parent))  # noqa: F821

import pandas as pd

from mkforest.data.traits import written_names
from mkforest.jobs.scripting import run_job
from mkforest.report import plots, style
from mkforest.report.plots_branches import support_branches


def main(smk):
    fits = pd.read_csv(smk.input.fits, sep="\t", keep_default_na=False, na_values=[""])
    fig = support_branches(fits, smk.params.criterion)
    style.show_written_names(fig, written_names(smk.input.traits))
    plots.save(fig, [smk.output.png, smk.output.svg])


run_job(snakemake, main)  # noqa: F821
