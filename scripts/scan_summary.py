"""All-pairs scan: each tree's false-discovery step and the summary across trees."""

import sys
from pathlib import Path

sys.path.insert(0, str(Path(snakemake.scriptdir).parent))  # noqa: F821

import pandas as pd

from mkforest.data.traits import with_written_names, written_names
from mkforest.jobs.scan import PAIR_COLUMNS, per_tree_table, summary_table
from mkforest.jobs.scripting import run_job


def main(smk):
    frames = [
        pd.read_csv(p, sep="\t", keep_default_na=False, na_values=["", "nan"])
        for p in smk.input.pairs
    ]
    frames = [f for f in frames if len(f)]  # a job with no pair (more jobs than pairs)
    rows = pd.concat(frames, ignore_index=True) if frames else pd.DataFrame(columns=PAIR_COLUMNS)
    level = smk.params.level
    per_tree = per_tree_table(rows, level)
    names = written_names(smk.input.traits)
    summary = summary_table(per_tree, level)
    with_written_names(per_tree, names).to_csv(
        smk.output.per_tree, sep="\t", index=False, float_format="%.10g"
    )
    with_written_names(summary, names).to_csv(
        smk.output.summary, sep="\t", index=False, float_format="%.6g"
    )


run_job(snakemake, main)  # noqa: F821
