"""Select trees (burn-in, thinning, sampling), root them if asked, check them, and write them
in chunks with a summary of what was done (prepared/trees/summary.json)."""
import sys
from pathlib import Path

sys.path.insert(0, str(Path(snakemake.scriptdir).parent))  # noqa: F821

import json
import logging

import pandas as pd

from mkforest.data.trees import describe_rooting, read_trees, save_trees
from mkforest.jobs.prepare import (
    auto_trees_per_job,
    burnin_count,
    check_same_tips,
    chunk,
    lengthen_branches,
    select_trees,
    short_branches,
)
from mkforest.jobs.scripting import run_job


def main(smk):
    log = logging.getLogger("mkforest")
    cfg = smk.params.trees
    source = f"tree file '{smk.input.trees}'"
    trees = read_trees(smk.input.trees, root=cfg.get("root"))
    keep = select_trees(len(trees), cfg["burnin"], cfg["thin"], cfg["sample"], smk.params.seed,
                        source)
    used = [trees[i] for i in keep]
    check_same_tips(used, source)
    minimum = cfg.get("min_branch_length") or 0.0
    report = [dict(tree=t.index, **short_branches(t, minimum)) for t in used]
    used = [lengthen_branches(t, minimum) for t in used]
    log.info("%d trees in %s; %d used after burn-in %s, thinning %d, sample %s; rooted %s",
             len(trees), smk.input.trees, len(used), cfg["burnin"], cfg["thin"], cfg["sample"],
             describe_rooting(cfg.get("root")))
    n_zero = sum(1 for r in report if r["zero_tips"])
    if n_zero:
        log.warning("%d of %d trees have tips on zero-length branches (tables/data_check.tsv "
                    "names them)%s", n_zero, len(used),
                    f"; branches shorter than {minimum:g} were lengthened to it" if minimum else "")
    out = Path(smk.output.chunks)
    out.mkdir(parents=True, exist_ok=True)
    per_job = cfg["per_job"]
    if per_job == "auto":
        # resources, not params: the layout is chosen once, by the run that prepares the
        # trees; resuming with other cores keeps it (and every finished fit)
        res = smk.resources
        per_job = auto_trees_per_job(len(used), used[0].n_tips, res.fits_per_tree, res.fit_slots)
        log.info("trees.per_job auto: %d trees per job (%d trees, %d fits per tree, %d slots)",
                 per_job, len(used), res.fits_per_tree, res.fit_slots)
    (out / "layout.json").write_text(json.dumps({"per_job": per_job, "trees": len(used),
                                                   "tips": used[0].n_tips}))
    rows = []
    for c, part in enumerate(chunk(used, per_job)):
        save_trees(out / f"chunk_{c:04d}.npz", part)
        rows += [{"tree": t.index, "chunk": c, "n_tips": t.n_tips, "height": t.height,
                  "total_length": t.total_length} for t in part]
    summary = {"n_in_file": len(trees), "burnin_dropped": burnin_count(len(trees), cfg["burnin"]),
               "root": cfg.get("root"), "rooting": describe_rooting(cfg.get("root")),
               "min_branch_length": minimum, "trees": report}
    (out / "summary.json").write_text(json.dumps(summary, indent=1))
    pd.DataFrame(rows).to_csv(smk.output.used, sep="\t", index=False)


run_job(snakemake, main)  # noqa: F821
