"""Local profile vs SLURM profile on the same 200-tree config (needs root: it
brings up a one-node SLURM cluster from Debian's packages, as the tests do).

Prints wall time and the number of SLURM submissions, and whether every table
is byte-identical between the two runs.

    python benchmarks/bench_slurm.py [--trees 200] [--workdir /tmp/mkforest-bench-slurm]
"""

from __future__ import annotations

import argparse
import shutil
import sys
from pathlib import Path

import yaml

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))
sys.path.insert(0, str(REPO / "tests"))

from slurm_cluster import one_node_slurm  # noqa: E402
from test_slurm import run_workflow_locally, run_workflow_on_slurm  # noqa: E402

from mkforest.demo import make_demo  # noqa: E402


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--trees", type=int, default=200)
    ap.add_argument("--workdir", default="/tmp/mkforest-bench-slurm")
    args = ap.parse_args()
    work = Path(args.workdir)
    if work.exists():
        shutil.rmtree(work)
    data = work / "data"
    make_demo(data, n_tips=60, n_trees=args.trees, seed=3)
    config = {
        "run": "bench200",
        "seed": 3,
        "trees": {"file": str(data / "trees.nex"), "per_job": 50},
        "traits": {
            "file": str(data / "traits.tsv"),
            "taxon_column": "taxon",
            "columns": ["glow", "habitat"],
        },
        "models": {"one_rate": {"kind": "equal"}, "free": {"kind": "unconstrained"}},
        "ancestral": {"enabled": False},
    }
    cfg = work / "config.yaml"
    cfg.write_text(yaml.safe_dump(config))
    local = run_workflow_locally(cfg, work / "local", timeout=1800)
    print(f"local profile: exit {local.returncode}, {local.seconds:.0f} s")
    with one_node_slurm(work / "cluster") as cluster:
        # the profile as shipped: its node size (cores: 2) lays each group of fits
        # out within the one-node test cluster's 2 cores
        slurm = run_workflow_on_slurm(cfg, work / "slurm", timeout=2400, cluster=cluster)
    submissions = slurm.log.read_text().count("has been submitted with SLURM jobid")
    print(
        f"SLURM profile: exit {slurm.returncode}, {slurm.seconds:.0f} s, "
        f"{submissions} SLURM submissions"
    )
    a = work / "local" / "results" / "bench200" / "tables"
    b = work / "slurm" / "results" / "bench200" / "tables"
    names = sorted(p.name for p in a.glob("*.tsv"))
    same = [n for n in names if (b / n).exists() and (a / n).read_bytes() == (b / n).read_bytes()]
    print(
        f"tables identical: {len(same)} of {len(names)}"
        + ("" if len(same) == len(names) else f" (differ: {sorted(set(names) - set(same))})")
    )
    return 0 if local.returncode == 0 and slurm.returncode == 0 and len(same) == len(names) else 1


if __name__ == "__main__":
    sys.exit(main())
