"""Figures of the Bayesian stage: one analysis's rate posteriors, or model probabilities."""

import sys
from pathlib import Path

sys.path.insert(0, str(Path(snakemake.scriptdir).parent))  # noqa: F821

from mkforest.data.traits import written_names
from mkforest.jobs.bayes import pooled_from_file, read_table
from mkforest.jobs.scripting import run_job
from mkforest.report import plots_bayes, style


def main(smk):
    out = [smk.output.png, smk.output.svg]
    if "draws" in smk.input.keys():
        analysis = smk.wildcards.analysis
        rates = read_table(smk.input.rates)
        summary = read_table(smk.input.summary)
        fig = plots_bayes.posterior_rates(
            pooled_from_file(smk.input.draws),
            rates[rates["analysis"] == analysis],
            summary[(summary["analysis"] == analysis)],
            smk.params.models,
            analysis,
            smk.params.pair_traits or None,
        )
    else:
        fig = plots_bayes.model_probabilities(
            read_table(smk.input.marginal), read_table(smk.input.support), smk.params.models
        )
    style.show_written_names(fig, written_names(smk.input.traits))
    style.save(fig, out)


run_job(snakemake, main)  # noqa: F821
