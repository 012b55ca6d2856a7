"""The clades to report ancestral states for: the summary tree's and the named ones."""

import sys
from pathlib import Path

sys.path.insert(0, str(Path(snakemake.scriptdir).parent))  # noqa: F821

import logging

from mkforest.data.clades import check_same_taxa, parse_named_clades
from mkforest.data.trees import load_trees, read_trees, to_newick
from mkforest.jobs.ancestral import target_clades
from mkforest.jobs.scripting import run_job


def main(smk):
    log = logging.getLogger("mkforest")
    trees = [t for path in sorted(smk.input.chunks) for t in load_trees(path)]
    taxa = check_same_taxa(trees, "the prepared tree sample")
    named = parse_named_clades(smk.params.clades, taxa)
    reference = None
    source = "reference tree"
    if smk.params.reference:
        source = f"reference tree file '{smk.params.reference}'"
        reference = read_trees(smk.params.reference)[0]
    table, summary = target_clades(trees, named, reference, source, smk.params.summary)
    table.to_csv(smk.output.clades, sep="\t", index=False)
    Path(smk.output.tree).write_text("[&R] " + to_newick(summary) + "\n")
    log.info(
        "%d trees; %d clades to report (summary tree: %s; %d named)",
        len(trees),
        len(table),
        table["summary_tree"].iloc[0] if len(table) else "none",
        len(named),
    )


run_job(snakemake, main)  # noqa: F821
