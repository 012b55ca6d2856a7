"""Tests between each pair's hypotheses, per tree and across trees."""

import sys
from pathlib import Path

sys.path.insert(0, str(Path(snakemake.scriptdir).parent))  # noqa: F821

import json
import logging

import pandas as pd

from mkforest.data.traits import traits_from_json
from mkforest.engine.pairs import pair_from_config, pair_models, selected_tests
from mkforest.jobs.pairs import (
    BOOTSTRAP_COLUMNS,
    TEST_COLUMNS,
    pair_test_rows,
    summary_rows,
)
from mkforest.jobs.scripting import run_job


def main(smk):
    log = logging.getLogger("mkforest")
    config = smk.params.config
    traits = traits_from_json(json.loads(Path(smk.input.traits).read_text()))
    fits = pd.read_csv(smk.input.fits, sep="\t")
    frames = [pd.read_csv(p, sep="\t") for p in smk.input.bootstrap]
    boot = (
        pd.concat(frames, ignore_index=True) if frames else pd.DataFrame(columns=BOOTSTRAP_COLUMNS)
    )
    for t in (fits, boot):
        t["tree_set"] = t["tree_set"].fillna("").astype(str)
    sets = list(dict.fromkeys(fits["tree_set"]))  # set order, as in fits.tsv
    test_table, summary = [], []
    for name, spec in config["pairs"].items():
        pair = pair_from_config(name, spec, traits)
        tests = selected_tests(name, spec, pair_models(name, spec, pair))
        if not tests:
            log.warning(
                "pair %s: no two of its hypotheses are nested; nothing to test (compare "
                "them by weight in model_support.tsv)",
                name,
            )
        for ts in sets:  # every tree set, each on its own trees
            mine = fits[fits["tree_set"] == ts]
            booted = boot[(boot["pair"] == name) & (boot["tree_set"] == ts)]
            rows = pair_test_rows(name, tests, mine, booted, spec["alpha"], ts)
            test_table += rows
            summary += summary_rows(
                pd.DataFrame(rows, columns=TEST_COLUMNS), mine, spec["bootstrap"]
            )
    tests_df = pd.DataFrame(test_table, columns=TEST_COLUMNS)
    summary_df = pd.DataFrame(summary)
    tests_df.to_csv(smk.output.tests, sep="\t", index=False, float_format="%.10g")
    summary_df.to_csv(smk.output.summary, sep="\t", index=False, float_format="%.6g")
    boot.to_csv(smk.output.bootstrap, sep="\t", index=False, float_format="%.10g")
    for row in summary:
        if row["caution"]:
            log.warning(
                "%s / pair %s, %s vs %s: %s",
                row["tree_set"],
                row["pair"],
                row["null"],
                row["alternative"],
                row["caution"],
            )


run_job(snakemake, main)  # noqa: F821
