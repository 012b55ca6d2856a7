"""All-pairs scan: every scanned trait's unconstrained fit on each tree of one chunk."""

import sys
from pathlib import Path

sys.path.insert(0, str(Path(snakemake.scriptdir).parent))  # noqa: F821

import json

import pandas as pd

from mkforest.data.traits import traits_from_json
from mkforest.data.trees import load_trees
from mkforest.jobs.scan import SINGLE_COLUMNS, singles_rows
from mkforest.jobs.scripting import run_job


def main(smk):
    traits = traits_from_json(json.loads(Path(smk.input.traits).read_text()))
    rows = singles_rows(load_trees(smk.input.trees), traits, smk.params.config)
    pd.DataFrame(rows, columns=SINGLE_COLUMNS).to_csv(smk.output[0], sep="\t", index=False)


run_job(snakemake, main)  # noqa: F821
