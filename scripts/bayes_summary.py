"""Tables across trees and one draws file per analysis from the Bayesian chunk jobs."""

import sys
from pathlib import Path

sys.path.insert(0, str(Path(snakemake.scriptdir).parent))  # noqa: F821

from mkforest.data.traits import written_names
from mkforest.jobs.bayes import write_summary
from mkforest.jobs.scripting import run_job


def main(smk):
    write_summary(
        rates=smk.input.rates,
        mls=smk.input.ml,
        draws=smk.input.draws,
        analyses=smk.params.analyses,
        pairs=smk.params.pairs,
        settings=smk.params.settings,
        out=smk.output,
        names=written_names(smk.input.traits),
    )


run_job(snakemake, main)  # noqa: F821
