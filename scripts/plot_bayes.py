"""Figures of the Bayesian stage: every analysis's rate posteriors, and the model
probabilities; a folder per kind, pages where a figure would not fit one."""

import sys
from pathlib import Path

sys.path.insert(0, str(Path(snakemake.scriptdir).parent))  # noqa: F821

from mkforest.data.traits import written_names
from mkforest.jobs.bayes import pooled_from_file, read_table
from mkforest.jobs.scripting import run_job
from mkforest.report import plots_bayes, style


def write(pages: dict, folder, names: dict) -> None:
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    for name, fig in pages.items():
        style.show_written_names(fig, names)
        style.save(fig, [folder / f"{name}.png", folder / f"{name}.svg"])


def main(smk):
    names = written_names(smk.input.traits)
    rates = read_table(smk.input.rates)
    summary = read_table(smk.input.summary)
    # one draws file per analysis, in the order of params.models
    for analysis, draws in zip(smk.params.models, smk.input.draws):
        pages = plots_bayes.posterior_rate_pages(
            pooled_from_file(draws),
            rates[rates["analysis"] == analysis],
            summary[summary["analysis"] == analysis],
            smk.params.models[analysis],
            analysis,
            smk.params.pair_traits.get(analysis) or None,
        )
        write(pages, smk.output.rates, names)
    pages = plots_bayes.model_probability_pages(
        read_table(smk.input.marginal), read_table(smk.input.support), smk.params.models
    )
    write(pages, smk.output.models, names)


run_job(snakemake, main)  # noqa: F821
