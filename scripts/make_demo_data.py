"""Generate the demo data set (an invented radiation; see mkforest/demo.py)."""

import sys
from pathlib import Path

sys.path.insert(0, str(Path(snakemake.scriptdir).parent))  # noqa: F821

from mkforest.demo import make_demo
from mkforest.jobs.scripting import run_job


def main(smk):
    make_demo(Path(smk.output.trees).parent)


run_job(snakemake, main)  # noqa: F821
