"""End-to-end scale benchmark: many trees through the real workflow.

Default: 1,000 trees x 200 tips x 4 traits x 3 models on 2 cores. Prints, per
run and as the median of ``--runs`` runs: the wall time, the CPU time of the
whole run (Snakemake and every job), the load average, the number of jobs, the
time spent inside fitting (sum of the fit jobs' own "fits took" lines) and the
share of wall time spent outside fitting (scheduler, process start-up,
preparation, aggregation, plots), and each serial stage's own time.

    python benchmarks/bench_workflow.py [--trees 1000] [--tips 200] [--per-job auto]
                                        [--traits habitat size banding glow]
                                        [--models equal symmetric unconstrained]
                                        [--cores 2] [--runs 3] [--ancestral] [--profile laptop]

The medium case of the speed issue: --trees 500 --tips 150 --traits banding glow
--models equal unconstrained.
"""

from __future__ import annotations

import argparse
import os
import re
import resource
import statistics
import subprocess
import sys
import time
from pathlib import Path

import yaml

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))

from mkforest.demo import make_demo  # noqa: E402


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--trees", type=int, default=1000)
    ap.add_argument("--tips", type=int, default=200)
    ap.add_argument("--per-job", default="auto", help="a number, or auto")
    ap.add_argument("--traits", nargs="+", default=["habitat", "size", "banding", "glow"])
    ap.add_argument(
        "--models",
        nargs="+",
        default=["equal", "symmetric", "unconstrained"],
        help="built-in kinds, one model each",
    )
    ap.add_argument("--runs", type=int, default=1)
    ap.add_argument("--cores", type=int, default=2)
    ap.add_argument("--ancestral", action="store_true", help="also run ancestral states and maps")
    ap.add_argument("--profile", default=None, help="a profile folder under profiles/")
    ap.add_argument("--workdir", default="/tmp/mkforest-bench")
    ap.add_argument("--snakemake-args", default="", help="more Snakemake options, one string")
    args = ap.parse_args()

    work = Path(args.workdir)
    data = work / "data"
    stamp = data / f"made_{args.trees}x{args.tips}"
    if not stamp.exists():
        t0 = time.perf_counter()
        make_demo(data, n_tips=args.tips, n_trees=args.trees, seed=99)
        stamp.touch()
        print(f"data generated in {time.perf_counter() - t0:.1f} s")
    config = {
        "run": "bench",
        "seed": 5,
        "trees": {
            "file": str(data / "trees.nex"),
            "per_job": args.per_job if args.per_job == "auto" else int(args.per_job),
        },
        "traits": {
            "file": str(data / "traits.tsv"),
            "taxon_column": "taxon",
            "columns": args.traits,
        },
        "models": {kind: {"kind": kind} for kind in args.models},
        "ancestral": {"enabled": bool(args.ancestral)},
    }
    cfg = work / "config.yaml"
    cfg.write_text(yaml.safe_dump(config))
    runs = [one_run(args, work, cfg) for _ in range(args.runs)]
    if any(r is None for r in runs):
        return 1
    print(
        f"{args.trees} trees x {args.tips} tips x {len(args.traits)} traits x "
        f"{len(args.models)} models, per_job {args.per_job}, {args.cores} cores"
    )
    keys = [
        "wall",
        "cpu",
        "load",
        "fit_seconds",
        "fit_cpu",
        "outside",
        "outside_cpu",
        "jobs",
        "fit_jobs",
    ]
    for i, r in enumerate(runs):
        print(
            f"run {i + 1}: "
            + ", ".join(f"{k} {r[k]:.1f}" for k in keys)
            + "; CPU by stage (s) "
            + ", ".join(f"{k} {v:.1f}" for k, v in sorted(r["stages"].items()))
            + "; peak memory by stage (MB) "
            + ", ".join(f"{k} {v:.0f}" for k, v in sorted(r["peaks"].items()))
        )
    med = {k: statistics.median(r[k] for r in runs) for k in keys}
    print(
        f"median of {len(runs)}: wall {med['wall']:.1f} s, CPU {med['cpu']:.1f} s, "
        f"fitting {med['fit_seconds']:.1f} s summed over {med['fit_jobs']:.0f} fit jobs "
        f"({med['jobs']:.0f} jobs), outside fitting {100 * med['outside']:.0f}% of the wall "
        f"time; fitting CPU {med['fit_cpu']:.1f} s, outside fitting {100 * med['outside_cpu']:.0f}%"
        f" of the CPU time; load average {med['load']:.1f}"
    )
    return 0


def one_run(args, work, cfg):
    results = work / "results"
    if results.exists():
        subprocess.run(["rm", "-rf", str(results), str(work / ".snakemake")], check=True)
    snakemake = str(Path(sys.executable).with_name("snakemake"))
    cmd = [
        snakemake,
        "--snakefile",
        str(REPO / "Snakefile"),
        "--directory",
        str(work),
        "--configfile",
        str(cfg),
        "--cores",
        str(args.cores),
        "--quiet",
        "all",
    ]
    if args.profile:
        cmd += ["--profile", str(REPO / "profiles" / args.profile)]
    cmd += args.snakemake_args.split()
    env = dict(os.environ, PYTHONPATH=str(REPO))
    load = os.getloadavg()[0]
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    t0 = time.perf_counter()
    proc = subprocess.run(cmd, capture_output=True, text=True, env=env)
    wall = time.perf_counter() - t0
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    if proc.returncode != 0:
        print(proc.stderr[-4000:])
        return None
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    logs = list((results / "bench" / "logs").rglob("*.log"))
    fit_logs = [p for p in logs if "/fit/" in str(p)]
    fit_seconds = fit_cpu = 0.0
    for p in fit_logs:
        m = re.search(r"fits took ([0-9.]+) s(?: \(CPU ([0-9.]+) s\))?", p.read_text())
        if m:
            fit_seconds += float(m.group(1))
            fit_cpu += float(m.group(2) or "nan")
    stages, peaks = {}, {}
    for p in logs:
        text = p.read_text()
        m = re.search(r"done in ([0-9.]+) s(?: \(CPU ([0-9.]+) s)?", text)
        key = "fit" if "/fit/" in str(p) else p.stem
        if m:
            stages[key] = stages.get(key, 0.0) + float(m.group(2) or "nan")
        m = re.search(r"peak memory ([0-9]+) MB", text)
        if m:
            peaks[key] = max(peaks.get(key, 0.0), float(m.group(1)))
    outside = max(0.0, 1.0 - (fit_seconds / args.cores) / wall)
    return {
        "wall": wall,
        "cpu": cpu,
        "load": load,
        "fit_seconds": fit_seconds,
        "fit_cpu": fit_cpu,
        "outside": outside,
        "outside_cpu": 1.0 - fit_cpu / cpu,
        "jobs": len(logs),
        "fit_jobs": len(fit_logs),
        "stages": stages,
        "peak_mb": max(peaks.values(), default=float("nan")),
        "peaks": peaks,
    }


if __name__ == "__main__":
    sys.exit(main())
