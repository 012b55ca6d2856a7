"""Sample the posterior of one model of one analysis on the chosen trees of one chunk."""

import sys
from pathlib import Path

sys.path.insert(0, str(Path(snakemake.scriptdir).parent))  # noqa: F821

import csv
import json
import logging
import time

import numpy as np

from mkforest.data.config import bayes_trees
from mkforest.data.traits import traits_from_json
from mkforest.data.trees import load_trees
from mkforest.jobs.analyses import analysis_setup, branch_treatment
from mkforest.jobs.bayes import ML_COLUMNS, POSTERIOR_COLUMNS, bayes_chunk
from mkforest.jobs.scripting import run_job


def main(smk):
    job = smk.params.job
    traits = traits_from_json(json.loads(Path(smk.input.traits).read_text()))
    trait, models = analysis_setup(job, job["analysis"], traits)
    model, root = models[job["model"]]
    with open(smk.input.used, newline="") as fh:
        used = list(csv.DictReader(fh, delimiter="\t"))
    chosen = {t for t, _ in bayes_trees(used, smk.params.tree_set, job["bayes"]["trees"])}
    trees = [t for t in load_trees(smk.input.trees) if t.index in chosen]
    start, cpu = time.perf_counter(), time.process_time()
    rates, mls, kept = bayes_chunk(
        trees,
        trait,
        model,
        root,
        job["analysis"],
        job["seed"],
        job["bayes"],
        job["traits"]["absent_taxa"],
        branch_treatment(job, job["analysis"], job["model"]),
    )
    flagged = sum(1 for r in mls if r["flagged"])
    logging.getLogger("mkforest").info(
        "%s / %s: %d trees sampled in %.2f s (CPU %.2f s), %d flagged",
        job["analysis"],
        job["model"],
        len(trees),
        time.perf_counter() - start,
        time.process_time() - cpu,
        flagged,
    )
    write_tsv(smk.output.rates, POSTERIOR_COLUMNS, rates)
    write_tsv(smk.output.ml, ML_COLUMNS, mls)
    with open(smk.output.draws, "wb") as fh:
        np.savez_compressed(fh, **kept)


def write_tsv(path, columns, rows):
    with open(path, "w", newline="") as fh:
        w = csv.DictWriter(fh, columns, delimiter="\t", lineterminator="\n")
        w.writeheader()
        w.writerows(rows)


run_job(snakemake, main)  # noqa: F821
