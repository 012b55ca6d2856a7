"""Paged ancestral figures: seconds per page for class trees and change counts.

Class trees (``plots_ancestral.class_tree_pages``) on invented trees of ``--tips`` tips
with two rate classes, and change counts (``change_pages``) of one trait of ``--states``
states with every rate free (k(k-1) directions), 20 trees; the tables come from
``tests/figure_data.py`` (seeded). Each case is drawn and written as PNG and SVG, as the
plot job does, ``--runs`` times; printed: pages, the median seconds for all of them and
per page (CPU time of this process, so other load counts less). For scale, the whole
class tree drawn as one figure (``class_tree`` without ``rows``: the figure before paging).

    python benchmarks/bench_figure_pages.py [--tips 90 250] [--states 3 7] [--runs 3]
"""

from __future__ import annotations

import argparse
import statistics
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))
sys.path.insert(0, str(REPO / "tests"))

import numpy as np  # noqa: E402
from figure_data import class_table, many_state_changes, random_tree  # noqa: E402

from mkforest.report import plots_ancestral, style  # noqa: E402


def cpu_seconds(draw, folder: Path) -> tuple:
    """(pages, CPU seconds) to draw the {name: figure} of draw() and write each page."""
    start = time.process_time()
    pages = draw()
    for name, fig in pages.items():
        style.save(fig, [folder / f"page{name}.png", folder / f"page{name}.svg"])
    return len(pages), time.process_time() - start


def report(label: str, draw, runs: int, folder: Path) -> None:
    out = [cpu_seconds(draw, folder) for _ in range(runs)]
    n = out[0][0]
    total = statistics.median(s for _, s in out)
    print(f"{label:<44} {n:>5} {total:>9.2f} {total / n:>9.2f}")


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--tips", type=int, nargs="+", default=[90, 250])
    ap.add_argument("--states", type=int, nargs="+", default=[3, 7])
    ap.add_argument("--runs", type=int, default=3)
    args = ap.parse_args()
    print(f"{'figure':<44} {'pages':>5} {'seconds':>9} {'s/page':>9}")
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        for n in args.tips:
            rng = np.random.default_rng(n)
            tree = random_tree(rng, n, "Tip")
            clades, classes = class_table(rng, tree)
            report(
                f"class tree, {n} tips, in pages",
                lambda: plots_ancestral.class_tree_pages(tree, classes, clades, "ink", "two"),
                args.runs,
                folder,
            )
            report(
                f"class tree, {n} tips, one figure (unpaged)",
                lambda: {"": plots_ancestral.class_tree(tree, classes, clades, "ink", "two")},
                args.runs,
                folder,
            )
        for k in args.states:
            per_tree, states = many_state_changes(np.random.default_rng(k), k=k)
            report(
                f"changes, {k} states ({k * (k - 1)} directions)",
                lambda: plots_ancestral.change_pages(per_tree, {}, {"hue": states}),
                args.runs,
                folder,
            )
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
