# Input functions and settings of the provenance rules (report.smk).
import os
import sys
import types
from datetime import datetime, timezone

from snakemake.io import is_flagged

from mkforest.report.provenance import input_files

# How and when this invocation of Snakemake started, for the manifest. A
# SimpleNamespace is not a builtin type, so Snakemake leaves it out of its
# params rerun check: a new start time alone never reruns the manifest.
INVOCATION = types.SimpleNamespace(
    command=list(sys.argv),
    started=datetime.now(timezone.utc).isoformat(timespec="seconds"),
    directory=os.getcwd(),
)
CONFIG_FILES = [str(p) for p in workflow.configfiles]
PROVENANCE = [f"{OUT}/manifest.json", f"{OUT}/methods.md"]

TARGET_FUNCTIONS.append(lambda wildcards: PROVENANCE)


localrules:
    methods,
    manifest,


def final_tables(wildcards):
    """Every final table of the run; stages that did not run have none."""
    return [f for f in all_targets(wildcards) if f.startswith(f"{OUT}/tables/")]


def run_results(wildcards):
    """What the manifest records: every final output but the manifest itself,
    trees_used.tsv, and the other tables and plots written by the same rules."""
    targets = [f for f in all_targets(wildcards) if f != f"{OUT}/manifest.json"]
    wanted = set(targets)
    siblings = {f"{OUT}/tables/trees_used.tsv"}
    for r in workflow.rules:
        outs = [str(f) for f in r.output if not is_flagged(f, "directory")]
        if wanted.intersection(outs):
            siblings.update(
                o
                for o in outs
                if o.startswith((f"{OUT}/tables/", f"{OUT}/plots/")) and "{" not in o
            )
    return targets + sorted(siblings - wanted)
