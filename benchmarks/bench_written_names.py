"""What showing trait names as written costs a job: reading them from prepared/traits.json
(``traits.written_names``, a full JSON read: the file also holds every taxon's states) and
adding the ``_as_written`` columns to a table (``traits.with_written_names``).

Invented data: ``--taxa`` taxa × ``--traits`` three-state traits whose headers hold a
space, and a fits-shaped table of ``--rows`` rows naming them.

    python benchmarks/bench_written_names.py [--taxa 10000] [--traits 50] [--rows 1000000]

Measured (2 shared cores under load, wall time): 10,000 taxa × 50 traits (traits.json
9.9 MB): written_names 1.4 s best of 3 (1.2 s in an earlier single timing; the jobs that
already read traits.json paid this before); 1,000,000 rows: with_written_names 0.26 s
best of 3 (a per-row Python loop took 2.9 s; pandas' lazy copy of the table 0.001 s).
"""

from __future__ import annotations

import argparse
import json
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

from mkforest.data.traits import Trait, traits_to_json, with_written_names, written_names


def best_of(fn, repeats: int = 3) -> float:
    times = []
    for _ in range(repeats):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return min(times)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--taxa", type=int, default=10000)
    ap.add_argument("--traits", type=int, default=50)
    ap.add_argument("--rows", type=int, default=1_000_000)
    args = ap.parse_args()
    rng = np.random.default_rng(0)
    taxa = tuple(f"t{i}" for i in range(args.taxa))
    traits = {
        f"trait_{j}": Trait(
            f"trait_{j}", ("a", "b", "c"), taxa, rng.random((args.taxa, 3)) < 0.5, f"trait {j}"
        )
        for j in range(args.traits)
    }
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "traits.json"
        path.write_text(json.dumps(traits_to_json(traits)))
        size = path.stat().st_size / 1e6
        read = best_of(lambda: written_names(path))
        names = written_names(path)
    table = pd.DataFrame(
        {
            "tree_set": ["trees"] * args.rows,
            "analysis": [f"trait_{j % args.traits}" for j in range(args.rows)],
            "log_likelihood": rng.random(args.rows),
        }
    )
    add = best_of(lambda: with_written_names(table, names))
    copy = best_of(lambda: table.copy())
    print(f"traits.json {size:.1f} MB ({args.taxa} taxa x {args.traits} traits)")
    print(f"written_names: {read:.3f} s")
    print(f"with_written_names, {args.rows} rows: {add:.3f} s (copying the table: {copy:.3f} s)")


if __name__ == "__main__":
    main()
