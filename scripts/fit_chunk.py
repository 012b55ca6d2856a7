"""Fit one model of one analysis on every tree of one chunk."""

import sys
from pathlib import Path

sys.path.insert(0, str(Path(snakemake.scriptdir).parent))  # noqa: F821

import csv
import json
import logging
import time

from mkforest.data.traits import traits_from_json
from mkforest.data.trees import load_trees
from mkforest.jobs.analyses import analysis_setup, branch_treatment
from mkforest.jobs.fit import FIT_COLUMNS, RATE_COLUMNS, fit_chunk
from mkforest.jobs.scripting import run_job


def main(smk):
    job = smk.params.job
    config = job
    traits = traits_from_json(json.loads(Path(smk.input.traits).read_text()))
    trait, models = analysis_setup(config, job["analysis"], traits)
    model, root = models[job["model"]]
    trees = load_trees(smk.input.trees)
    fit = config["fitting"]
    start, cpu = time.perf_counter(), time.process_time()
    fits, rates = fit_chunk(
        trees,
        trait,
        model,
        root,
        job["analysis"],
        config["seed"],
        fit["starts"],
        fit["lower"],
        fit["upper"],
        config["traits"]["absent_taxa"],
        fit["max_starts"],
        branch_treatment(config, job["analysis"], job["model"]),
    )
    logging.getLogger("mkforest").info(
        "fits took %.3f s (CPU %.3f s)", time.perf_counter() - start, time.process_time() - cpu
    )
    bad = sum(1 for f in fits if not f["converged"])
    logging.getLogger("mkforest").info(
        "%s / %s: %d trees fitted, %d not converged", job["analysis"], job["model"], len(fits), bad
    )
    write_tsv(smk.output.fits, FIT_COLUMNS, fits)
    write_tsv(smk.output.rates, RATE_COLUMNS, rates)


def write_tsv(path, columns, rows):
    """Plain csv keeps this job's start-up light (no pandas import); floats in repr form."""
    with open(path, "w", newline="") as fh:
        w = csv.DictWriter(fh, columns, delimiter="\t", lineterminator="\n")
        w.writeheader()
        w.writerows(rows)


run_job(snakemake, main)  # noqa: F821
