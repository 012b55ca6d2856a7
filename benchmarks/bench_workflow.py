"""End-to-end scale benchmark: many trees through the real workflow.

Default: 1,000 trees x 200 tips x 4 traits x 3 models on 2 cores (the target
is <= 10 minutes). Prints the wall time, the number of jobs, the time spent
inside fitting (sum of the fit jobs' own "fits took" lines) and the share of
wall time spent outside fitting (scheduler, process start-up, preparation,
aggregation, plots).

    python benchmarks/bench_workflow.py [--trees 1000] [--tips 200] [--per-job 100]
                                        [--cores 2] [--ancestral] [--profile laptop]
"""

from __future__ import annotations

import argparse
import os
import re
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
    ap.add_argument("--per-job", type=int, default=100)
    ap.add_argument("--cores", type=int, default=2)
    ap.add_argument("--ancestral", action="store_true", help="also run ancestral states and maps")
    ap.add_argument("--profile", default=None, help="a profile folder under profiles/")
    ap.add_argument("--workdir", default="/tmp/mkforest-bench")
    args = ap.parse_args()

    work = Path(args.workdir)
    data = work / "data"
    if not (data / "trees.nex").exists():
        t0 = time.perf_counter()
        make_demo(data, n_tips=args.tips, n_trees=args.trees, seed=99)
        print(f"data generated in {time.perf_counter() - t0:.1f} s")
    config = {
        "run": "bench", "seed": 5,
        "trees": {"file": str(data / "trees.nex"), "per_job": args.per_job},
        "traits": {"file": str(data / "traits.tsv"), "taxon_column": "taxon",
                   "columns": ["habitat", "size", "banding", "glow"]},
        "models": {"one_rate": {"kind": "equal"}, "mirrored": {"kind": "symmetric"},
                   "free": {"kind": "unconstrained"}},
        "ancestral": {"enabled": bool(args.ancestral)},
    }
    cfg = work / "config.yaml"
    cfg.write_text(yaml.safe_dump(config))
    results = work / "results"
    if results.exists():
        subprocess.run(["rm", "-rf", str(results), str(work / ".snakemake")], check=True)
    snakemake = str(Path(sys.executable).with_name("snakemake"))
    cmd = [snakemake, "--snakefile", str(REPO / "Snakefile"), "--directory", str(work),
           "--configfile", str(cfg), "--cores", str(args.cores), "--quiet", "all"]
    if args.profile:
        cmd += ["--profile", str(REPO / "profiles" / args.profile)]
    env = dict(os.environ, PYTHONPATH=str(REPO))
    t0 = time.perf_counter()
    proc = subprocess.run(cmd, capture_output=True, text=True, env=env)
    wall = time.perf_counter() - t0
    if proc.returncode != 0:
        print(proc.stderr[-4000:])
        return 1
    logs = list((results / "bench" / "logs").rglob("*.log"))
    fit_logs = [p for p in logs if "/fit/" in str(p)]
    fit_seconds = 0.0
    for p in fit_logs:
        m = re.search(r"fits took ([0-9.]+) s", p.read_text())
        if m:
            fit_seconds += float(m.group(1))
    n_jobs = len(logs)
    print(f"{args.trees} trees x {args.tips} tips x 4 traits x 3 models, per_job {args.per_job}, "
          f"{args.cores} cores")
    print(f"wall time            {wall:8.1f} s")
    print(f"jobs (with a log)    {n_jobs:8d}   fit jobs {len(fit_logs)}")
    print(f"time inside fitting  {fit_seconds:8.1f} s  (summed over jobs; "
          f"{fit_seconds / args.cores:.1f} s per core)")
    outside = max(0.0, 1.0 - (fit_seconds / args.cores) / wall)
    print(f"share of wall time outside fitting: {100 * outside:.0f}%")
    return 0


if __name__ == "__main__":
    sys.exit(main())
