"""Ancestral states and transition counts summarised across every tree and chunk."""
import sys
from pathlib import Path

sys.path.insert(0, str(Path(snakemake.scriptdir).parent))  # noqa: F821

import pandas as pd

from mkforest.jobs.ancestral import class_table, load_chunks, state_table, transition_tables
from mkforest.jobs.scripting import run_job


def main(smk):
    clades = pd.read_csv(smk.input.clades, sep="\t", dtype={"members": str, "clade": str})
    used = pd.read_csv(smk.input.used, sep="\t", keep_default_na=False)
    if "tree_set" in used:  # ancestral states are reconstructed on the first tree set
        used = used[used["tree_set"] == used["tree_set"].iloc[0]]
    n_total = len(used)
    states, trans, times, per_tree, classes = [], [], [], [], []
    for analysis in smk.params.analyses:
        paths = [p for p in smk.input.chunks if Path(p).parent.name == analysis]
        data = load_chunks(paths)
        states.append(state_table(analysis, data, clades, n_total))
        classes.append(class_table(analysis, data, clades, n_total))
        t, d, p = transition_tables(analysis, data, n_total)
        trans.append(t)
        times.append(d)
        per_tree.append(p)
    out = smk.output
    pd.concat(states).to_csv(out.states, sep="\t", index=False, float_format="%.6g")
    pd.concat(trans).to_csv(out.transitions, sep="\t", index=False, float_format="%.6g")
    pd.concat(times).to_csv(out.times, sep="\t", index=False, float_format="%.6g")
    pd.concat(per_tree).to_csv(out.per_tree, sep="\t", index=False, float_format="%.6g")
    pd.concat(classes).to_csv(out.classes, sep="\t", index=False, float_format="%.6g")


run_job(snakemake, main)  # noqa: F821
