"""Select trees (burn-in, thinning, sampling), check them, and write them in chunks."""
import sys
from pathlib import Path

sys.path.insert(0, str(Path(snakemake.scriptdir).parent))  # noqa: F821

import logging

import pandas as pd

from mkforest.data.trees import describe_rooting, read_trees, save_trees
from mkforest.jobs.prepare import check_same_tips, chunk, select_trees
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
    log.info("%d trees in %s; %d used after burn-in %s, thinning %d, sample %s; rooted %s",
             len(trees), smk.input.trees, len(used), cfg["burnin"], cfg["thin"], cfg["sample"],
             describe_rooting(cfg.get("root")))
    out = Path(smk.output.chunks)
    out.mkdir(parents=True, exist_ok=True)
    rows = []
    for c, part in enumerate(chunk(used, cfg["per_job"])):
        save_trees(out / f"chunk_{c:04d}.npz", part)
        rows += [{"tree": t.index, "chunk": c, "n_tips": t.n_tips, "height": t.height,
                  "total_length": t.total_length} for t in part]
    pd.DataFrame(rows).to_csv(smk.output.used, sep="\t", index=False)


run_job(snakemake, main)  # noqa: F821
