"""Plot of support for branch-length treatments and tree sets across trees."""

import sys
from pathlib import Path

sys.path.insert(0, str(Path(snakemake.scriptdir).parent))  # noqa: F821

import pandas as pd

from mkforest.jobs.scripting import run_job
from mkforest.report import plots
from mkforest.report.plots_branches import support_branches


def main(smk):
    fits = pd.read_csv(smk.input.fits, sep="\t", keep_default_na=False, na_values=[""])
    plots.save(support_branches(fits, smk.params.criterion), [smk.output.png, smk.output.svg])


run_job(snakemake, main)  # noqa: F821
