"""Gather every fit job's rows and summarise model support across trees."""

import sys
from pathlib import Path

sys.path.insert(0, str(Path(snakemake.scriptdir).parent))  # noqa: F821

import logging

import pandas as pd

from mkforest.data.traits import with_written_names, written_names
from mkforest.engine.branch_support import branch_tests, treatment_support, tree_set_support
from mkforest.engine.summarise import (
    add_weights,
    averaged_rates,
    mark_duplicates,
    model_support,
    rate_summary,
)
from mkforest.jobs.scripting import run_job


def _read(paths):
    frames = [pd.read_csv(p, sep="\t", keep_default_na=False, na_values=[""]) for p in paths]
    return pd.concat(frames, ignore_index=True)


def main(smk):
    log = logging.getLogger("mkforest")
    fits = _read(smk.input.fits)
    rates = _read(smk.input.rates)
    for col in ("at_lower", "at_upper", "open_upper", "note", "branch_at_bound", "tree_set"):
        if col in fits:
            fits[col] = fits[col].astype(object).fillna("")
    rates["at_bound"] = rates["at_bound"].astype(object).fillna("")
    order = {a: i for i, a in enumerate(smk.params.analyses)}
    sets = {s: i for i, s in enumerate(smk.params.tree_sets)}
    rank = {"analysis": order, "tree_set": sets}
    fits = fits.sort_values(
        ["tree_set", "analysis", "model", "tree"],
        key=lambda s: s.map(rank[s.name]) if s.name in rank else s,
    )
    fits = mark_duplicates(fits, smk.params.model_order)
    fits = add_weights(fits, smk.params.criterion)
    rates = rates.sort_values(
        ["tree_set", "analysis", "model", "tree", "from_state", "to_state"],
        key=lambda s: s.map(sets) if s.name == "tree_set" else s,
    )
    support = model_support(fits)
    averaged = averaged_rates(fits, rates)
    tests, test_summary = branch_tests(fits)
    names = written_names(smk.input.traits)
    for table, path in (
        (fits, smk.output.fits),
        (rates, smk.output.rates),
        (support, smk.output.support),
        (averaged, smk.output.averaged),
        (rate_summary(rates, averaged), smk.output.rate_summary),
        (treatment_support(fits), smk.output.treatments),
        (tests, smk.output.branch_tests),
        (test_summary, smk.output.branch_test_summary),
        (tree_set_support(fits, smk.params.criterion), smk.output.tree_sets),
    ):
        with_written_names(table, names).to_csv(path, sep="\t", index=False, float_format="%.10g")
    for row in support.to_dict("records"):
        if row["caution"]:
            log.warning(
                "%s / %s / %s: %s", row["tree_set"], row["analysis"], row["model"], row["caution"]
            )


run_job(snakemake, main)  # noqa: F821
