"""Tree-file reading: DendroPy path vs the fast reader, in seconds per million tree-tips.

Reads the demo's NEXUS sample (``mkforest.demo.make_demo``: TRANSLATE table, [&R],
lengths with six decimals) with ``read_trees(path, fast=False)`` (DendroPy objects,
then ``from_dendropy``) and ``read_trees(path)`` (``mkforest/data/newick.py``), checks
the two give the same arrays, and prints the median of ``--runs`` runs of each (CPU
time of this process, so other load on the machine counts less).

    python benchmarks/bench_tree_reading.py [--sizes 500x150 1000x200] [--runs 5]
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
from pathlib import Path

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))

from mkforest.data.trees import read_trees  # noqa: E402
from mkforest.demo import make_demo  # noqa: E402


def timed(fn):
    wall, cpu = time.perf_counter(), time.process_time()
    out = fn()
    return out, time.perf_counter() - wall, time.process_time() - cpu


def same(a, b) -> bool:
    return all(
        x.tip_labels == y.tip_labels
        and x.parent.tobytes() == y.parent.tobytes()
        and x.length.tobytes() == y.length.tobytes()
        for x, y in zip(a, b)
    ) and len(a) == len(b)


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument(
        "--sizes",
        nargs="+",
        default=["500x150", "1000x200"],
        help="trees x tips of each demo sample",
    )
    ap.add_argument("--runs", type=int, default=5)
    ap.add_argument("--workdir", default="/tmp/mkforest-bench-trees")
    args = ap.parse_args()
    for size in args.sizes:
        n_trees, n_tips = (int(x) for x in size.split("x"))
        data = Path(args.workdir) / size
        if not (data / "trees.nex").is_file():
            make_demo(data, n_tips=n_tips, n_trees=n_trees, seed=99)
        path = data / "trees.nex"
        million = n_trees * n_tips / 1e6
        rows = {"dendropy": [], "fast": []}
        for _ in range(args.runs):
            slow, w1, c1 = timed(lambda: read_trees(path, fast=False))
            fast, w2, c2 = timed(lambda: read_trees(path))
            if not same(fast, slow):
                print(f"{size}: the two paths disagree")
                return 1
            rows["dendropy"].append((w1, c1))
            rows["fast"].append((w2, c2))
        med = {
            k: (statistics.median(w for w, _ in v), statistics.median(c for _, c in v))
            for k, v in rows.items()
        }
        print(
            f"{n_trees} trees x {n_tips} tips ({path.stat().st_size / 1e6:.1f} MB), "
            f"median of {args.runs}: "
            + "; ".join(
                f"{k} {w:.2f} s wall, {c:.2f} s CPU = {c / million:.1f} s CPU per million tree-tips"
                for k, (w, c) in med.items()
            )
            + f"; fast path {med['dendropy'][1] / med['fast'][1]:.1f}x less CPU"
        )
    return 0


if __name__ == "__main__":
    sys.exit(main())
