"""How often fits are flagged as not converged, and what each start policy costs.

Every fit of a config (by default the demo's, on the demo data and on data
simulated the same way with other seeds) is run with its first ``--starts``
seeded starts (the fixed order of ``fitting.start_sequence``), keeping the
ln L each start reached. Because start i is the same whatever the policy, every
policy is then read off the same record:

- ``fixed N``: always N starts (the first release: 5);
- ``adaptive m..M``: at least m starts, then more while the two best disagree,
  at most M;
- ``fit_model m..M``: the same, with at least as many starts as the model has
  free rates, up to 5 (``fitting.fit_model``'s rule).

For each policy: fits flagged (fewer than two starts within 0.01 of the best),
mean starts per fit, and fits whose best ln L is more than 0.01 below the best
of all ``--starts`` starts (a poorer optimum reported).

    python benchmarks/convergence_rate.py [--starts 20] [--seeds 2026 7 11]
"""

from __future__ import annotations

import argparse
import json
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))

from mkforest.data.config import analyses, load_config  # noqa: E402
from mkforest.data.traits import read_traits  # noqa: E402
from mkforest.data.trees import read_trees  # noqa: E402
from mkforest.demo import make_demo  # noqa: E402
from mkforest.engine.fitting import AGREE_TOL, fit_model, min_starts  # noqa: E402
from mkforest.jobs.analyses import analysis_setup  # noqa: E402
from mkforest.jobs.prepare import select_trees  # noqa: E402
from mkforest.seeds import derive_seed  # noqa: E402


def first_tree_set(config: dict) -> dict:
    """The config's block of trees: ``trees``, or the first of ``tree_sets``."""
    sets = config.get("tree_sets") or {"trees": config["trees"]}
    return next(iter(sets.values()))


def record_starts(config: dict, n_starts: int) -> list:
    """[(analysis, model, tree, [ln L per start])] for every fit of the config, on the
    trees of its first tree set."""
    tcfg = first_tree_set(config)
    trees = read_trees(tcfg["file"])
    kept = select_trees(len(trees), tcfg["burnin"], tcfg["thin"], tcfg["sample"], config["seed"])
    trees = [trees[i] for i in kept]
    c = config["traits"]
    traits = read_traits(
        c["file"], c["taxon_column"], c["columns"], c["missing"], c["separator"], c["order"]
    )
    out = []
    for analysis in analyses(config):
        trait, models = analysis_setup(config, analysis, traits)
        if len(trait.observed_states()) < 2:
            continue
        for name, (model, root) in models.items():
            for tree in trees:
                X = trait.tip_partials(tree, absent=c["absent_taxa"])
                fit = fit_model(
                    tree,
                    X,
                    model,
                    root,
                    n_starts=n_starts,
                    max_starts=n_starts,
                    seed=derive_seed(config["seed"], tree.index, analysis, name),
                    lower=config["fitting"]["lower"],
                    upper=config["fitting"]["upper"],
                )
                out.append(
                    (analysis, name, tree.index, list(fit.start_log_likelihoods), model.n_params)
                )
    return out


def policy(lls: list, least: int, most: int, n_params: int = 0) -> tuple:
    """(best ln L, starts run, flagged) of the adaptive rule on one fit's record;
    with n_params, at least min_starts(n_params, least, most) starts (fit_model's rule)."""
    if n_params:
        least = min_starts(n_params, least, most)
    lls = [x if x is not None else -np.inf for x in lls]
    run = []
    for ll in lls[:most]:
        run.append(ll)
        top = sorted(run, reverse=True)
        if len(run) >= least and len(run) >= 2 and top[0] - top[1] <= AGREE_TOL:
            break
    best = max(run)
    agree = sum(1 for x in run if best - x <= AGREE_TOL)
    return best, len(run), agree < 2 and np.isfinite(best)


def report(records: list, label: str, n_starts: int) -> None:
    n = len(records)
    print(f"\n{label}: {n} fits, {n_starts} starts recorded per fit")
    print(
        f"  {'policy':<16} {'flagged':>14} {'starts/fit':>10} {'poorer optimum':>15}"
        f" {'differs from fixed 5':>21}"
    )
    rules = [
        ("fixed 5", 5, 5, False),
        ("adaptive 2..20", 2, 20, False),
        ("adaptive 3..20", 3, 20, False),
        ("adaptive 5..20", 5, 20, False),
        ("fit_model 2..20", 2, 20, True),
    ]
    old = [policy(r[3], 5, 5)[0] for r in records]
    for name, least, most, by_rates in rules:
        if most > n_starts:
            continue
        res = [policy(r[3], least, most, r[4] if by_rates else 0) for r in records]
        flagged = sum(1 for r in res if r[2])
        starts = np.mean([r[1] for r in res])
        poorer = sum(
            1
            for r, rec in zip(res, records)
            if np.isfinite(r[0]) and max(rec[3]) - r[0] > AGREE_TOL
        )
        differs = sum(1 for r, o in zip(res, old) if np.isfinite(o) and abs(r[0] - o) > AGREE_TOL)
        print(
            f"  {name:<16} {flagged:6d} ({100 * flagged / n:4.2f}%) {starts:10.2f} "
            f"{poorer:15d} {differs:21d}"
        )
    by_model = {}
    for rec in records:
        key = f"{rec[0]}/{rec[1]} ({rec[4]} rates)"
        row = by_model.setdefault(key, [0, 0, 0, 0])
        best = max(x if x is not None else -np.inf for x in rec[3])
        row[0] += 1
        row[1] += policy(rec[3], 2, most_starts(n_starts), rec[4])[2]
        row[2] += best - policy(rec[3], 2, most_starts(n_starts), rec[4])[0] > AGREE_TOL
        row[3] += best - policy(rec[3], 5, 5)[0] > AGREE_TOL
    print(
        "  by analysis/model: fits, flagged (fit_model 2..20), poorer optimum (fit_model 2..20), "
        "poorer optimum (fixed 5)"
    )
    for key, row in sorted(by_model.items()):
        if any(row[1:]):
            print(f"    {key:<48} {row[0]:5d} {row[1]:4d} {row[2]:4d} {row[3]:4d}")


def most_starts(n_starts):
    return min(20, n_starts)


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--starts", type=int, default=20)
    ap.add_argument(
        "--seeds",
        type=int,
        nargs="+",
        default=[2026, 7],
        help="demo-data seeds (2026 is the demo itself)",
    )
    ap.add_argument("--config", default=str(REPO / "config" / "config.yaml"))
    ap.add_argument("--save", help="write the records of every seed to this JSON file")
    ap.add_argument("--load", help="read records from a JSON file written by --save")
    args = ap.parse_args()
    if args.load:
        for label, records in json.loads(Path(args.load).read_text()).items():
            records = [
                (a, m, t, [-np.inf if x is None else x for x in lls], p)
                for a, m, t, lls, p in records
            ]
            report(records, label, len(records[0][3]))
        return 0
    saved = {}
    for seed in args.seeds:
        with tempfile.TemporaryDirectory() as tmp:
            paths = make_demo(Path(tmp), seed=seed)
            config = load_config(args.config)
            first_tree_set(config)["file"] = str(paths["trees"])
            config["traits"]["file"] = str(paths["traits"])
            t0 = time.process_time()
            records = record_starts(config, args.starts)
            cpu = time.process_time() - t0
        label = "demo data" if seed == 2026 else f"simulated like the demo (seed {seed})"
        report(records, f"{label}, {cpu:.0f} s CPU", args.starts)
        saved[label] = [
            (a, m, t, [x if np.isfinite(x) else None for x in lls], p)
            for a, m, t, lls, p in records
        ]
        if args.save:
            Path(args.save).write_text(json.dumps(saved))
    return 0


if __name__ == "__main__":
    sys.exit(main())
