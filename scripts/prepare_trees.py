"""Select trees (burn-in, thinning, sampling) of every tree set, root them if asked, check
them, and write them in chunks numbered on from one set to the next (sets.json lists each
set's chunks), with a summary of what was done to each set (prepared/trees/summary.json: the first set at the top, every set under "sets")."""

import sys
from pathlib import Path

sys.path.insert(0, str(Path(snakemake.scriptdir).parent))  # noqa: F821

import json
import logging

import pandas as pd

from mkforest.data.trees import describe_rooting, read_trees, save_trees, tree_file_features
from mkforest.jobs.prepare import (
    auto_trees_per_job,
    burnin_count,
    chain_start,
    check_same_taxa_across_sets,
    check_same_tips,
    check_tree_lengths,
    chunk,
    lengthen_branches,
    select_trees,
    short_branches,
)
from mkforest.jobs.scripting import run_job


def main(smk):
    log = logging.getLogger("mkforest")
    out = Path(smk.output.chunks)
    out.mkdir(parents=True, exist_ok=True)
    rows, sets, firsts, summary, layout = [], {}, {}, None, None
    c = 0
    order = smk.params.get("tree_set_order") or list(smk.params.tree_sets)
    for name in order:  # the config's order, not the sorted keys of the params
        cfg = smk.params.tree_sets[name]
        source = f"tree file '{cfg['file']}'" + (
            f" (tree set '{name}')" if len(smk.params.tree_sets) > 1 else ""
        )
        no_lengths = smk.params.get("no_lengths", "error")
        filled = []
        trees = read_trees(cfg["file"], root=cfg.get("root"), no_lengths=no_lengths, filled=filled)
        keep = select_trees(
            len(trees), cfg["burnin"], cfg["thin"], cfg["sample"], smk.params.seed, source
        )
        used = [trees[i] for i in keep]
        check_same_tips(used, source)
        minimum = cfg.get("min_branch_length") or 0.0
        report = [dict(tree=t.index, **short_branches(t, minimum)) for t in used]
        used = [lengthen_branches(t, minimum).with_tree_set(name) for t in used]
        check_tree_lengths(used, source)
        firsts[name] = (used[0], source)
        start = "" if used[0].index in filled else chain_start(used[0])
        if start:
            log.warning(
                "%s: the first tree kept (tree %d) looks like a sampler's starting tree (%s); "
                "raise trees.burnin to drop it",
                name,
                used[0].index,
                start,
            )
        log.info(
            "%s: %d trees in %s; %d used after burn-in %s, thinning %d, sample %s; rooted %s",
            name,
            len(trees),
            cfg["file"],
            len(used),
            cfg["burnin"],
            cfg["thin"],
            cfg["sample"],
            describe_rooting(cfg.get("root")),
        )
        n_zero = sum(1 for r in report if r["zero_tips"])
        if n_zero:
            log.warning(
                "%s: %d of %d trees have tips on zero-length branches "
                "(tables/data_check.tsv names them)%s",
                name,
                n_zero,
                len(used),
                f"; branches shorter than {minimum:g} were lengthened to it" if minimum else "",
            )
        per_job = cfg.get("per_job", "auto")  # a $ref in the schema: no default filled
        if per_job == "auto":
            # resources, not params: the layout is chosen once, by the run that prepares the
            # trees; resuming with other cores keeps it (and every finished fit)
            res = smk.resources
            per_job = auto_trees_per_job(
                len(used), used[0].n_tips, res.fits_per_tree, res.fit_slots
            )
            log.info(
                "%s: trees.per_job auto: %d trees per job (%d trees, %d fits per tree, %d slots)",
                name,
                per_job,
                len(used),
                res.fits_per_tree,
                res.fit_slots,
            )
        if layout is None:  # the first set's layout sizes the jobs' resources
            layout = {"per_job": per_job, "trees": len(used), "tips": used[0].n_tips}
        sets[name] = []
        for part in chunk(used, per_job):
            save_trees(out / f"chunk_{c:04d}.npz", part)
            sets[name].append(f"{c:04d}")
            rows += [
                {
                    "tree_set": name,
                    "tree": t.index,
                    "chunk": c,
                    "n_tips": t.n_tips,
                    "height": t.height,
                    "total_length": t.total_length,
                }
                for t in part
            ]
            c += 1
        facts = {
            "n_in_file": len(trees),
            "burnin_dropped": burnin_count(len(trees), cfg["burnin"]),
            "root": cfg.get("root"),
            "rooting": describe_rooting(cfg.get("root")),
            "min_branch_length": minimum,
            "without_lengths": len(filled),
            "first_kept": {"tree": used[0].index, "why": start} if start else None,
            "file_features": tree_file_features(
                Path(cfg["file"]).read_text(encoding="utf-8-sig", errors="replace")
            ),
            "trees": report,
        }
        if summary is None:  # the first set's facts at the top (the methods text's), every set's
            summary = {**facts, "sets": {}}
        summary["sets"][name] = facts
    check_same_taxa_across_sets(firsts)
    (out / "sets.json").write_text(json.dumps(sets, indent=1))
    (out / "layout.json").write_text(json.dumps(layout))
    (out / "summary.json").write_text(json.dumps(summary, indent=1))
    pd.DataFrame(rows).to_csv(smk.output.used, sep="\t", index=False)


run_job(snakemake, main)  # noqa: F821
