"""Benchmark: a whole run of the kind users bring, timed on one checkout or another.

Two tree sets (the demo's time-calibrated trees and the same trees on a relaxed clock)
of N trees x T tips, eight traits (the demo's six; 'flicker', which alternates between
neighbouring tips so every model's rates run to the upper bound; 'ridges', a 3-state
trait with a tenth of its cells shuffled), the demo's models plus a two-class hidden
model on two traits, kappa (the demo's length_power), one pair with its bootstrap, and
ancestral states with stochastic maps. The config uses only keys that every checkout
since the second wave reads, so the same run can be timed before and after a change:

    PYTHONPATH=$PWD .venv/bin/python benchmarks/bench_full_run.py [--repo ROOT]
        [--tips 250] [--trees 120] [--maps 100] [--cores 2] [--keep DIR]

--repo: the checkout whose Snakefile and package run (e.g. an export of an older
commit). Prints the run's wall time, the CPU time of Snakemake and every job it ran
(from the operating system's accounting of waited-for children), and per rule the jobs'
summed wall and CPU seconds from their logs' last lines (where the checkout writes them).
"""

from __future__ import annotations

import argparse
import shutil
import sys
import tempfile
from pathlib import Path

import numpy as np
import yaml

HERE = Path(__file__).resolve().parent.parent
sys.path[:0] = [str(HERE), str(HERE / "benchmarks")]  # inputs always from this checkout

from bench_bound_maps import job_times, run_workflow  # noqa: E402


def write_inputs(work: Path, tips: int, trees: int, maps: int) -> Path:
    """Demo-scenario data at the asked size, two traits added; returns the config path."""
    from mkforest.demo import make_demo

    data = work / "data"
    paths = make_demo(data, n_tips=tips, n_trees=trees)
    table = [line.split("\t") for line in Path(paths["traits"]).read_text().splitlines()]
    header, rows = table[0], table[1:]
    habitat = header.index("habitat")
    rng = np.random.default_rng(7)
    ridges = [{"litter": "low", "rock": "mid", "canopy": "high"}.get(r[habitat], "?") for r in rows]
    shuffled = rng.choice(len(rows), size=len(rows) // 10, replace=False)
    values = [ridges[i] for i in shuffled]
    rng.shuffle(values)
    for i, v in zip(shuffled, values):
        ridges[i] = v
    # 'flicker' alternates along the first tree's tip order: neighbours always differ
    import dendropy

    first = dendropy.Tree.get(path=str(paths["trees"]), schema="nexus")
    by_position = [leaf.taxon.label.replace(" ", "_") for leaf in first.leaf_node_iter()]
    flicker = {name: ("on", "off")[i % 2] for i, name in enumerate(by_position)}
    lines = ["\t".join(header + ["flicker", "ridges"])]
    for r, rid in zip(rows, ridges):
        lines.append("\t".join(r + [flicker[r[0]], rid]))
    (data / "traits8.tsv").write_text("\n".join(lines) + "\n")

    config = yaml.safe_load((HERE / "config" / "config.yaml").read_text())
    for key in ("bayes", "scan"):
        config.pop(key, None)
    config["run"] = "fullrun"
    config["tree_sets"] = {
        "dated": {"file": str(paths["trees"]), "burnin": 0, "per_job": "auto"},
        "molecular": {"file": str(paths["trees_molecular"]), "burnin": 0, "per_job": "auto"},
    }
    traits = config["traits"]
    traits["file"] = str(data / "traits8.tsv")
    traits["columns"] = [*traits["columns"], "flicker", "ridges"]
    traits["order"]["ridges"] = ["low", "mid", "high"]
    for key in list(traits):
        if key not in ("file", "taxon_column", "columns", "missing", "separator", "order"):
            traits.pop(key)
    config["models"]["two_speed"] = {
        "kind": "equal",
        "hidden_classes": 2,
        "applies_to": ["habitat", "banding"],
    }
    config["pairs"] = {"shell_pattern": config["pairs"]["shell_pattern"]}
    config["ancestral"] = {"enabled": True, "maps": maps}
    path = work / "config.yaml"
    path.write_text(yaml.safe_dump(config, sort_keys=False))
    return path


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repo", default=str(HERE))
    ap.add_argument("--tips", type=int, default=250)
    ap.add_argument("--trees", type=int, default=120)
    ap.add_argument("--maps", type=int, default=100)
    ap.add_argument("--cores", type=int, default=2)
    ap.add_argument("--keep", default=None, help="copy the results folder here")
    args = ap.parse_args()
    repo = Path(args.repo).resolve()
    with tempfile.TemporaryDirectory(prefix="bench_full_run_") as tmp:
        work = Path(tmp)
        cfg = write_inputs(work, args.tips, args.trees, args.maps)
        proc, wall, cpu = run_workflow(repo, work, cfg, args.cores)
        if args.keep:
            shutil.copytree(work / "results", Path(args.keep) / "results", dirs_exist_ok=True)
            shutil.copy(cfg, Path(args.keep) / "config.yaml")
        if proc.returncode:
            sys.exit(proc.stderr[-3000:])
        times = job_times(work / "results" / "fullrun" / "logs")
    print(
        f"repo {repo}: 2 tree sets x {args.trees} trees x {args.tips} tips, 8 traits, "
        f"{args.maps} maps per tree"
    )
    print(f"run wall {wall:.1f} s (cores {args.cores}); CPU of the run and its jobs {cpu:.1f} s")
    print(f"{'rule':34s} {'jobs':>4s} {'wall s':>8s} {'CPU s':>8s}")
    for key, (n, w, c) in sorted(times.items(), key=lambda kv: -kv[1][2]):
        print(f"{key:34s} {n:4d} {w:8.1f} {c:8.1f}")


if __name__ == "__main__":
    main()
