"""Ancestral states and transition counts summarised across every tree and chunk."""

import sys
from pathlib import Path

sys.path.insert(0, str(Path(snakemake.scriptdir).parent))  # noqa: F821

import pandas as pd

from mkforest.data.traits import with_written_names, written_names
from mkforest.jobs.ancestral import (
    clades_in_set,
    class_table,
    load_chunks,
    state_table,
    transition_tables,
    tree_set_slices,
)
from mkforest.jobs.scripting import run_job


def main(smk):
    clades = pd.read_csv(smk.input.clades, sep="\t", dtype={"members": str, "clade": str})
    used = pd.read_csv(smk.input.used, sep="\t", keep_default_na=False)
    n_used = (
        used.groupby(used["tree_set"].astype(str)).size().to_dict()
        if "tree_set" in used
        else {"": len(used)}
    )
    states, trans, times, per_tree, classes = [], [], [], [], []
    for analysis in smk.params.analyses:
        paths = [p for p in smk.input.chunks if Path(p).parent.name == analysis]
        # every tree set on its own trees, in the order of the chunks (the sets' order)
        for ts, data in tree_set_slices(load_chunks(paths)):
            n_total = int(n_used.get(ts, len(data["tree"])))
            here = clades_in_set(clades, data)
            t, d, p = transition_tables(analysis, data, n_total)
            for frame, table in (
                (states, state_table(analysis, data, here, n_total)),
                (classes, class_table(analysis, data, here, n_total)),
                (trans, t),
                (times, d),
                (per_tree, p),
            ):
                frame.append(table.assign(tree_set=ts)[["tree_set", *table.columns]])
    out = smk.output
    names = written_names(smk.input.traits)
    for frames, path in (
        (states, out.states),
        (trans, out.transitions),
        (times, out.times),
        (per_tree, out.per_tree),
        (classes, out.classes),
    ):
        table = with_written_names(pd.concat(frames), names)
        table.to_csv(path, sep="\t", index=False, float_format="%.6g")


run_job(snakemake, main)  # noqa: F821
