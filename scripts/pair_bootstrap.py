"""Parametric bootstrap of a trait pair's tests on one chunk of trees."""

import sys
from pathlib import Path

sys.path.insert(0, str(Path(snakemake.scriptdir).parent))  # noqa: F821

import json
import logging

import pandas as pd

from mkforest.data.traits import traits_from_json
from mkforest.data.trees import load_trees
from mkforest.engine.pairs import pair_from_config, pair_models, selected_tests
from mkforest.jobs.pairs import (
    BOOTSTRAP_COLUMNS,
    bootstrap_chunk,
    bootstrap_null_rates,
    bootstrap_tree_indices,
)
from mkforest.jobs.scripting import run_job


def _read(paths):
    return pd.concat([pd.read_csv(p, sep="\t") for p in paths], ignore_index=True)


def main(smk):
    log = logging.getLogger("mkforest")
    job = smk.params.job
    config, name = job["config"], job["pair"]
    spec = config["pairs"][name]
    traits = traits_from_json(json.loads(Path(smk.input.traits).read_text()))
    pair = pair_from_config(name, spec, traits)
    models = pair_models(name, spec, pair)
    tests = selected_tests(name, spec, models)
    trees = load_trees(smk.input.trees)
    used = pd.read_csv(smk.input.used, sep="\t", keep_default_na=False)
    if trees and "tree_set" in used:  # a chunk holds trees of one set: choose among that set's
        used = used[used["tree_set"].astype(str) == trees[0].tree_set]
    selected = set(bootstrap_tree_indices(used["tree"].tolist(), spec["bootstrap_trees"]))
    null_rates = bootstrap_null_rates(tests, models, _read(smk.input.fits), _read(smk.input.rates))
    mine = [t.index for t in trees if t.index in selected]
    log.info(
        "pair %s: bootstrapping %d trees of this chunk (%s), %d tests, %d data sets each",
        name,
        len(mine),
        mine,
        len(tests),
        spec["bootstrap"],
    )
    fit = config["fitting"]
    rows = bootstrap_chunk(
        pair,
        models,
        tests,
        trees,
        selected,
        null_rates,
        spec["bootstrap"],
        config["seed"],
        fit["starts"],
        fit["lower"],
        fit["upper"],
        fit["max_starts"],
    )
    pd.DataFrame(rows, columns=BOOTSTRAP_COLUMNS).to_csv(
        smk.output[0], sep="\t", index=False, float_format="%.10g"
    )


run_job(snakemake, main)  # noqa: F821
