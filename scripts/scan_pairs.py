"""All-pairs scan: one job's share of the pairs tested on each tree of one chunk."""

import sys
from pathlib import Path

sys.path.insert(0, str(Path(snakemake.scriptdir).parent))  # noqa: F821

import json
import logging

import pandas as pd

from mkforest.data.traits import traits_from_json
from mkforest.data.trees import load_trees
from mkforest.jobs.scan import PAIR_COLUMNS, pair_rows, read_singles
from mkforest.jobs.scripting import run_job


def main(smk):
    traits = traits_from_json(json.loads(Path(smk.input.traits).read_text()))
    singles = read_singles(pd.read_csv(smk.input.singles, sep="\t", keep_default_na=False))
    rows = pair_rows(
        load_trees(smk.input.trees),
        traits,
        smk.params.config,
        singles,
        int(smk.wildcards.job),
        int(smk.params.n_jobs),
    )
    pd.DataFrame(rows, columns=PAIR_COLUMNS).to_csv(
        smk.output[0], sep="\t", index=False, float_format="%.12g"
    )
    bad = sum(1 for r in rows if not r["converged"])
    logging.getLogger("mkforest").info("%d tests, %d with a fit not converged", len(rows), bad)


run_job(snakemake, main)  # noqa: F821
