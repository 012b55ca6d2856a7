"""The all-pairs scan as a triangular matrix of traits."""

import sys
from pathlib import Path

sys.path.insert(0, str(Path(snakemake.scriptdir).parent))  # noqa: F821

import pandas as pd

from mkforest.data.traits import written_names
from mkforest.jobs.scan import figure_alternative
from mkforest.jobs.scripting import run_job
from mkforest.report import style
from mkforest.report.methods_branches import first_set
from mkforest.report.plots_scan import scan_matrix


def main(smk):
    summary = pd.read_csv(smk.input.summary, sep="\t", keep_default_na=False, na_values=["", "nan"])
    sets = [t for t in dict.fromkeys(summary.get("tree_set", pd.Series(dtype=str))) if t]
    summary = first_set(summary)  # the figure shows the first tree set, and names it
    alt = figure_alternative(summary)
    mine = summary[summary["alternative"] == alt]
    n_trees = int(mine["n_trees"].max()) if len(mine) else 0
    note = f"; independent against {alt}, {n_trees} tree{'' if n_trees == 1 else 's'}"
    if len(sets) > 1:
        note += f" of set '{sets[0]}' (the other sets: tables/scan.tsv)"
    fig = scan_matrix(mine, smk.params.columns, note)
    style.show_written_names(fig, written_names(smk.input.traits))
    style.save(fig, [smk.output.png, smk.output.svg])


run_job(snakemake, main)  # noqa: F821
