"""Ancestral state probabilities and stochastic maps for one analysis on one chunk of trees."""

import sys
from pathlib import Path

sys.path.insert(0, str(Path(snakemake.scriptdir).parent))  # noqa: F821

import json
import logging

import numpy as np
import pandas as pd

from mkforest.data.traits import traits_from_json
from mkforest.data.trees import load_trees
from mkforest.jobs.analyses import analysis_setup
from mkforest.jobs.ancestral import chunk_ancestral
from mkforest.jobs.scripting import run_job


def read_all(paths, **kw):
    return pd.concat([pd.read_csv(p, sep="\t", **kw) for p in paths], ignore_index=True)


def main(smk):
    job = smk.params.job
    config = job["config"]
    analysis = job["analysis"]
    traits = traits_from_json(json.loads(Path(smk.input.traits).read_text()))
    trait, models = analysis_setup(config, analysis, traits)
    trees = load_trees(smk.input.trees)
    fits = read_all(smk.input.fits, keep_default_na=True)
    rates = read_all(smk.input.rates, dtype={"from_state": str, "to_state": str})
    clades = pd.read_csv(smk.input.clades, sep="\t", dtype={"members": str, "clade": str})
    anc = config["ancestral"]
    out = chunk_ancestral(
        trees,
        trait,
        models,
        fits,
        rates,
        clades,
        analysis,
        anc["model"],
        anc["maps"],
        config["seed"],
        config["criterion"],
        config["traits"]["absent_taxa"],
    )
    np.savez_compressed(smk.output[0], **out)
    logging.getLogger("mkforest").info(
        "%s: %d trees (%d skipped), %d clades, %d maps per tree, model choice %s",
        analysis,
        len(trees),
        int(out["skipped"].sum()),
        len(clades),
        anc["maps"],
        out["choice"],
    )


run_job(snakemake, main)  # noqa: F821
