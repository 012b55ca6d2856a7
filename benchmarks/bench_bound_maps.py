"""Benchmark: a run whose fits of one trait sit at the upper rate bound, before and after
stochastic maps under such fits stopped being drawn (they were drawn, then left out of
every count; their cost grows with the rate).

One topology (a pure-birth tree) with its branch lengths scaled per tree (a small
posterior-like sample); 'glow' alternates between neighbouring tips, so every model's
rates run to the upper bound; 'habitat' is clustered (two halves), so its rates are
estimated. Ancestral states with N maps per tree.

    PYTHONPATH=$PWD .venv/bin/python benchmarks/bench_bound_maps.py [--repo ROOT]
        [--tips 60] [--trees 12] [--maps 200] [--cores 2]

--repo: the checkout whose Snakefile and package run (e.g. an export of an older
commit, to time the run before a change). Prints the run's wall time and, per rule (and
per analysis for the ancestral chunks), the jobs' summed wall and CPU seconds from
their logs' last lines.
"""

from __future__ import annotations

import argparse
import os
import re
import resource
import subprocess
import sys
import tempfile
import time
from collections import defaultdict
from pathlib import Path

import numpy as np
import yaml

HERE = Path(__file__).resolve().parent.parent


def yule_newick(rng, n_tips: int, scale: float) -> tuple:
    """(newick, tip labels in drawing order) of a pure-birth tree of height ~1 x scale."""
    nodes = {0: []}
    length = {0: 0.0}
    active, t, nxt = [0], 0.0, 1
    born = {0: 0.0}
    while len(active) < n_tips:
        t += rng.exponential(1.0 / len(active))
        v = active.pop(int(rng.integers(len(active))))
        length[v] = t - born[v]
        for _ in range(2):
            nodes[v].append(nxt)
            nodes[nxt] = []
            born[nxt] = t
            active.append(nxt)
            nxt += 1
    t += rng.exponential(1.0 / len(active))
    for v in active:
        length[v] = t - born[v]
    tips = []

    def write(v):
        if not nodes[v]:
            tips.append(f"t{v}")
            return f"t{v}:{length[v] * scale / t:.6f}"
        inner = ",".join(write(c) for c in nodes[v])
        return f"({inner})" + (f":{length[v] * scale / t:.6f}" if v else "")

    return write(0) + ";", tips


def write_inputs(work: Path, tips: int, trees: int, maps: int) -> Path:
    rng = np.random.default_rng(21)
    lines, labels = [], None
    for i in range(trees):
        newick, order = yule_newick(np.random.default_rng(21), tips, 1.0 + 0.05 * i)
        labels = order
        lines.append(newick)
    (work / "trees.nwk").write_text("\n".join(lines) + "\n")
    half = len(labels) // 2
    rows = ["taxon\tglow\thabitat"] + [
        f"{t}\t{('dull', 'glowing')[i % 2]}\t{('litter', 'rock')[i >= half]}"
        for i, t in enumerate(labels)
    ]
    (work / "traits.tsv").write_text("\n".join(rows) + "\n")
    config = {
        "run": "bounds",
        "seed": int(rng.integers(100)),
        "trees": {"file": str(work / "trees.nwk"), "burnin": 0, "per_job": max(1, trees // 2)},
        "traits": {
            "file": str(work / "traits.tsv"),
            "taxon_column": "taxon",
            "columns": ["glow", "habitat"],
        },
        "models": {"one_rate": {"kind": "equal"}, "free": {"kind": "unconstrained"}},
        "fitting": {"starts": 2},
        "ancestral": {"enabled": True, "maps": maps},
    }
    path = work / "config.yaml"
    path.write_text(yaml.safe_dump(config, sort_keys=False))
    return path


DONE = re.compile(r"done in ([0-9.]+) s \(CPU ([0-9.]+) s")


def job_times(logs: Path) -> dict:
    """{rule or rule/analysis: [jobs, wall, cpu]} from the jobs' last log lines."""
    out = defaultdict(lambda: [0, 0.0, 0.0])
    for log in sorted(logs.rglob("*.log")):
        m = None
        for line in log.read_text().splitlines():
            m = DONE.search(line) or m
        if m is None:
            continue
        rel = log.relative_to(logs)
        key = (
            f"ancestral_chunk/{rel.parts[1]}"
            if rel.parts[0] == "ancestral" and len(rel.parts) == 3
            else str(rel.with_suffix(""))
        )
        if "/" in key and not key.startswith("ancestral_chunk"):
            key = rel.parts[0]
        rec = out[key]
        rec[0] += 1
        rec[1] += float(m.group(1))
        rec[2] += float(m.group(2))
    return dict(out)


def run_workflow(repo: Path, work: Path, cfg: Path, cores: int) -> tuple:
    """(finished process, wall s, CPU s of Snakemake and every job it waited for): the
    checkout ``repo``'s Snakefile and package run in ``work`` on config ``cfg``."""
    snakemake = str(Path(sys.executable).with_name("snakemake"))
    cmd = [snakemake, "--snakefile", str(repo / "Snakefile"), "--directory", str(work)]
    cmd += ["--configfile", str(cfg), "--cores", str(cores), "--quiet"]
    env = dict(os.environ, PYTHONPATH=str(repo))
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    start = time.perf_counter()
    proc = subprocess.run(cmd, capture_output=True, text=True, env=env)
    wall = time.perf_counter() - start
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    return proc, wall, cpu


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repo", default=str(HERE))
    ap.add_argument("--tips", type=int, default=60)
    ap.add_argument("--trees", type=int, default=12)
    ap.add_argument("--maps", type=int, default=200)
    ap.add_argument("--cores", type=int, default=2)
    args = ap.parse_args()
    repo = Path(args.repo).resolve()
    with tempfile.TemporaryDirectory(prefix="bench_bound_maps_") as tmp:
        work = Path(tmp)
        cfg = write_inputs(work, args.tips, args.trees, args.maps)
        proc, wall, _ = run_workflow(repo, work, cfg, args.cores)
        if proc.returncode:
            sys.exit(proc.stderr[-3000:])
        times = job_times(work / "results" / "bounds" / "logs")
    print(f"repo {repo}: {args.tips} tips, {args.trees} trees, {args.maps} maps per tree")
    print(f"run wall {wall:.1f} s (cores {args.cores})")
    print(f"{'rule':34s} {'jobs':>4s} {'wall s':>8s} {'CPU s':>8s}")
    for key, (n, w, c) in sorted(times.items(), key=lambda kv: -kv[1][2]):
        print(f"{key:34s} {n:4d} {w:8.1f} {c:8.1f}")
    print(
        f"{'all jobs':34s} {sum(v[0] for v in times.values()):4d} "
        f"{sum(v[1] for v in times.values()):8.1f} {sum(v[2] for v in times.values()):8.1f}"
    )


if __name__ == "__main__":
    main()
