"""What the Bayesian stage of a finished run cost, read from its job logs.

    python benchmarks/bayes_stage_cost.py results/demo

Prints, per sampling job (analysis / model), the trees sampled, the CPU seconds of
sampling and per tree, the flagged posteriors; then the stage's total CPU, the CPU of
every other job of the run (each job's "done in ... CPU" line), the wall time from
the first to the last log line, and the size of each draws file. On a shared machine
the wall time includes other people's load; the CPU seconds do not (divide the total
by the cores for the time on an idle machine).
"""

from __future__ import annotations

import re
import sys
from datetime import datetime
from pathlib import Path

SAMPLED = re.compile(
    r"(\S+) / (\S+): (\d+) trees sampled in ([\d.]+) s \(CPU ([\d.]+) s\), (\d+) flagged"
)
DONE = re.compile(r"done in ([\d.]+) s \(CPU ([\d.]+) s")
STAMP = re.compile(r"^(\d{4}-\d\d-\d\d \d\d:\d\d:\d\d),\d+")


def main(run: Path) -> None:
    logs = sorted((run / "logs").rglob("*.log"))
    bayes_cpu = other_cpu = 0.0
    stamps = []
    print(f"{'analysis / model':32s} {'trees':>5s} {'CPU s':>8s} {'s/tree':>7s} {'flagged':>7s}")
    for log in logs:
        text = log.read_text(errors="replace")
        stamps += [
            datetime.fromisoformat(m.group(1)) for m in map(STAMP.match, text.splitlines()) if m
        ]
        done = DONE.findall(text)
        cpu = float(done[-1][1]) if done else 0.0
        hit = SAMPLED.search(text)
        if hit and "bayes" in log.parts:
            a, m, n, _, c, f = hit.groups()
            print(
                f"{a + ' / ' + m:32s} {n:>5s} {float(c):8.1f} {float(c) / max(int(n), 1):7.2f} {f:>7s}"
            )
            bayes_cpu += cpu
        elif "bayes" in log.parts:
            bayes_cpu += cpu
        else:
            other_cpu += cpu
    print(
        f"Bayesian stage: {bayes_cpu:.0f} s CPU (jobs, start-up included); other jobs: {other_cpu:.0f} s CPU"
    )
    if stamps:
        print(f"wall, first to last log line: {(max(stamps) - min(stamps)).total_seconds():.0f} s")
    for nc in sorted((run / "posterior").glob("*.nc")):
        print(f"{nc.name:28s} {nc.stat().st_size / 1e6:6.2f} MB")


if __name__ == "__main__":
    main(Path(sys.argv[1] if len(sys.argv) > 1 else "results/demo"))
