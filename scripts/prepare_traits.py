"""Code the trait table, check it against the trees, and check every model on it."""
import sys
from pathlib import Path

sys.path.insert(0, str(Path(snakemake.scriptdir).parent))  # noqa: F821

import json
import logging

import pandas as pd

from mkforest.data.traits import read_traits, traits_to_json
from mkforest.data.trees import load_trees
from mkforest.errors import InputError
from mkforest.jobs.prepare import data_check
from mkforest.jobs.scripting import run_job


def main(smk):
    log = logging.getLogger("mkforest")
    tcfg = smk.params.traits
    traits = read_traits(smk.input.traits, tcfg["taxon_column"], tcfg["columns"],
                         tcfg["missing"], tcfg["separator"], tcfg["order"])
    chunks = sorted(Path(smk.input.chunks).glob("chunk_*.npz"))
    tips = load_trees(chunks[0])[0].tip_labels
    rows, problems = data_check(traits, tips, tcfg["absent_taxa"],
                                f"trait table '{smk.input.traits}'")
    pd.DataFrame(rows).to_csv(smk.output.check, sep="\t", index=False)
    for r in rows:
        if r["item"] == "taxa_in_table_only" and r["value"]:
            log.warning("trait '%s': %d taxa in the table are in no tree and are ignored: %s",
                        r["trait"], r["value"], r["detail"][:200])
        if r["item"] == "varies" and not r["value"]:
            log.warning("trait '%s': %s", r["trait"], r["detail"])
    if problems:
        raise InputError(problems[0])
    Path(smk.output.coded).write_text(json.dumps(traits_to_json(traits)))


run_job(snakemake, main)  # noqa: F821
