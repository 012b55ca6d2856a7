"""Calibration and power of the trait-pair tests (independent vs dependent, 4 df).

Two binary traits are simulated many times on one pure-birth tree (default 100
tips, height 1):

  null     the traits change independently (the 'independent' hypothesis holds)
  linked   the traits evolve together: 'absent+bee' and 'present+moth' are
           stable, a mismatched state is left six times faster (the
           'dependent' hypothesis holds, 'independent' does not)
  mild     the same pattern, but a mismatched state is left only 2.5 times
           faster

Both hypotheses are fitted with a uniform root. The simulated data draw their
root state as that model assumes (every joint state 1/4), or, with
--data-root stationary, from the stationary distribution of the simulating
chain (a misspecified root, to see what that does to the tests).

For every data set both hypotheses are fitted as the workflow fits them
(mkforest.engine.fitting.fit_model, 5 starts) and the likelihood-ratio statistic is
compared with chi-square on 4 df (Pagel 1994); on a subset, the statistic is
also compared with its parametric-bootstrap distribution (Goldman 1993):
data sets simulated under the fitted null, each fitted the same way (null rates at
or near the lower bound taken at the edge of their 95% interval, as the workflow
does: mkforest.engine.pairs.simulation_rates; --simulate-from estimate uses the
estimates as they are, the first release's way, and --simulate-from both runs the
two on the same data sets). Reported: rejections at alpha = 0.05 with their counts and an
exact 95 % binomial interval (Clopper-Pearson, scipy.stats.binomtest), the
bootstrap's false rejections split by whether the null's fit has a rate at the
lower bound (the workflow flags those trees), and the CPU and wall time. Work is spread over worker processes; every data set's seed derives
from (seed, scenario, data set), so the figures do not depend on the number of
workers.

Run:  python benchmarks/pair_calibration.py                 (defaults: ~10 min on 2 cores)
      python benchmarks/pair_calibration.py --quick         (a one-minute smoke run)
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import time
from multiprocessing import Pool
from pathlib import Path

os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

import numpy as np  # noqa: E402
from scipy.stats import binomtest, chi2  # noqa: E402

from mkforest.data.traits import trait_from_mapping  # noqa: E402
from mkforest.data.trees import parse_newick  # noqa: E402
from mkforest.demo import newick, yule_tree  # noqa: E402
from mkforest.engine import pairs  # noqa: E402
from mkforest.engine.simulate import simulate_states  # noqa: E402
from mkforest.seeds import derive_seed  # noqa: E402

ALPHA = 0.05
STARTS = 5  # optimiser starts per fit: the workflow's default (fitting.starts)
INDEPENDENT_RATES = {
    "limb: absent->present": 1.0,
    "limb: present->absent": 1.5,
    "visitor: bee->moth": 0.8,
    "visitor: moth->bee": 1.2,
}


def linked_rates(fast: float) -> dict:
    """Leave a matched state at rate 1, a mismatched one at rate ``fast``."""
    return {
        "limb: absent->present | visitor=bee": 1.0,
        "limb: absent->present | visitor=moth": fast,
        "limb: present->absent | visitor=bee": fast,
        "limb: present->absent | visitor=moth": 1.0,
        "visitor: bee->moth | limb=absent": 1.0,
        "visitor: bee->moth | limb=present": fast,
        "visitor: moth->bee | limb=absent": fast,
        "visitor: moth->bee | limb=present": 1.0,
    }


_STATE = {}


def setup(n_tips: int, seed: int):
    rng = np.random.default_rng(seed)
    names = [f"sp{i:03d}" for i in range(n_tips)]
    tree = parse_newick(newick(yule_tree(names, rng, height=1.0)))
    # placeholder data: only the states and taxa matter for building the models
    first = trait_from_mapping(
        "limb", {t: ("absent", "present")[i % 2] for i, t in enumerate(names)}
    )
    second = trait_from_mapping("visitor", {t: ("bee", "moth")[i % 2] for i, t in enumerate(names)})
    pair = pairs.make_pair("limb_visitor", first, second)
    ind = pairs.hypothesis_model(pair, "independent")
    dep = pairs.hypothesis_model(pair, "dependent")
    q = {
        "null": ind.q_matrix([INDEPENDENT_RATES[x] for x in ind.labels]),
        "linked": dep.q_matrix([linked_rates(6.0)[x] for x in dep.labels]),
        "mild": dep.q_matrix([linked_rates(2.5)[x] for x in dep.labels]),
    }
    return dict(tree=tree, pair=pair, ind=ind, dep=dep, q=q, seed=seed)


def _init(n_tips, seed, data_root, simulate_from):
    _STATE.update(setup(n_tips, seed))
    _STATE["data_root"] = data_root
    _STATE["simulate_from"] = simulate_from


def one_data_set(task):
    """(scenario, i, n_replicates) -> dict of results for one data set."""
    scenario, i, n_rep = task
    s = _STATE
    tree, pair, ind, dep = s["tree"], s["pair"], s["ind"], s["dep"]
    seed = derive_seed(s["seed"], "calibration", scenario, i)
    q = s["q"][scenario]
    # 'model': the root drawn as the fitted model assumes (uniform: every joint state 1/4);
    # 'stationary': from the stationary distribution of the simulating chain
    weights = np.full(4, 0.25) if s["data_root"] == "model" else None
    states = simulate_states(tree, q, np.random.default_rng(seed), root_weights=weights)
    none = (np.zeros(tree.n_tips, bool),) * 2
    X = pairs.simulate_pair_partials(pair, tree, states, none)
    t0, c0 = time.perf_counter(), time.process_time()
    stat, fit_null, _ = pairs.lr_statistic(tree, X, ind, dep, n_starts=STARTS, seed=seed)
    out = {
        "scenario": scenario,
        "i": i,
        "statistic": stat,
        "p_chi2": float(chi2.sf(stat, 4)),
        "fit_seconds": time.perf_counter() - t0,
        "fit_cpu_seconds": time.process_time() - c0,
        "null_at_lower_bound": bool(fit_null.at_lower),
        "tip_states": np.bincount(states[: tree.n_tips], minlength=4).tolist(),
    }
    if n_rep:
        # the bootstrap simulates on this data set's own tree object; tree.index is 0
        t0, c0 = time.perf_counter(), time.process_time()
        out["null_rates_moved"] = len(pairs.simulation_rates(tree, X, ind, fit_null.rates)[1])
        modes = {"interval-edge": [True], "estimate": [False], "both": [True, False]}
        for at_edge in modes[s["simulate_from"]]:
            key = "" if at_edge else "_at_estimate"
            if not at_edge and "p_bootstrap" in out and not out["null_rates_moved"]:
                # no rate moved: the same simulated data sets, the same statistics
                out["p_bootstrap" + key] = out["p_bootstrap"]
                continue
            sims = pairs.bootstrap_statistics(
                pair,
                tree,
                ind,
                dep,
                fit_null.rates,
                "uniform",
                replicates=range(n_rep),
                seed=seed,
                n_starts=STARTS,
                from_interval_edge=at_edge,
            )
            out["p_bootstrap" + key] = pairs.bootstrap_p_value(stat, sims)
            out["simulated" + key] = sims.tolist()
        if "p_bootstrap" not in out:
            out["p_bootstrap"] = out["p_bootstrap_at_estimate"]
            out["simulated"] = out.pop("simulated_at_estimate")
        out["bootstrap_seconds"] = time.perf_counter() - t0
        out["bootstrap_cpu_seconds"] = time.process_time() - c0
    return out


def rejection(rows, key):
    n = len(rows)
    k = sum(1 for r in rows if r[key] <= ALPHA)
    ci = binomtest(k, n).proportion_ci(0.95) if n else None
    return {
        "rejected": k,
        "n": n,
        "rate": k / n if n else float("nan"),
        "ci95": [ci.low, ci.high] if ci else None,
    }


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--tips", type=int, default=100)
    ap.add_argument("--chi-sets", type=int, default=800, help="null data sets, chi-square only")
    ap.add_argument(
        "--power-sets",
        type=int,
        default=200,
        help="linked and mild data sets each, chi-square only",
    )
    ap.add_argument("--boot-sets", type=int, default=200, help="null data sets with a bootstrap")
    ap.add_argument(
        "--boot-power-sets", type=int, default=50, help="mild data sets with a bootstrap"
    )
    ap.add_argument("--replicates", type=int, default=99, help="bootstrap data sets per test")
    ap.add_argument(
        "--data-root",
        choices=["model", "stationary"],
        default="model",
        help="root state of the simulated data: as the fitted model (uniform root) "
        "assumes, or from the stationary distribution (a misspecified root)",
    )
    ap.add_argument(
        "--simulate-from",
        choices=["interval-edge", "estimate", "both"],
        default="interval-edge",
        help="bootstrap null rates: the workflow's way (rates at or near the lower "
        "bound moved to the edge of their 95%% interval, "
        "mkforest.engine.pairs.simulation_rates), the fitted estimates as "
        "they are (the first release), or both on the same data sets (the "
        "second bootstrap only where a rate moves; reported as *_at_estimate)",
    )
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--seed", type=int, default=2026)
    ap.add_argument("--quick", action="store_true", help="tiny numbers, to check the script runs")
    ap.add_argument("--out", default=None, help="write every result as JSON here")
    a = ap.parse_args(argv)
    if a.quick:
        a.chi_sets, a.power_sets, a.boot_sets, a.boot_power_sets, a.replicates = 6, 4, 2, 2, 4
    tasks = (
        [("null", i, 0) for i in range(a.chi_sets)]
        + [("linked", i, 0) for i in range(a.power_sets)]
        + [("mild", i, 0) for i in range(a.power_sets)]
        + [("null", a.chi_sets + i, a.replicates) for i in range(a.boot_sets)]
        + [("mild", a.power_sets + i, a.replicates) for i in range(a.boot_power_sets)]
    )
    # the longest tasks first, so the workers finish together
    tasks.sort(key=lambda t: -t[2])
    t0 = time.perf_counter()
    with Pool(
        a.workers, initializer=_init, initargs=(a.tips, a.seed, a.data_root, a.simulate_from)
    ) as pool:
        results = pool.map(one_data_set, tasks, chunksize=1)
    wall = time.perf_counter() - t0
    null = [r for r in results if r["scenario"] == "null"]
    linked = [r for r in results if r["scenario"] == "linked"]
    mild = [r for r in results if r["scenario"] == "mild"]
    booted = [r for r in results if "bootstrap_seconds" in r]
    report = {
        "tips": a.tips,
        "alpha": ALPHA,
        "workers": a.workers,
        "wall_seconds": round(wall, 1),
        "load_average_1min_at_end": round(os.getloadavg()[0], 2),
        "replicates": a.replicates,
        "fit_starts": STARTS,
        "data_root": a.data_root,
        "simulate_from": a.simulate_from,
        "chi2_false_rejection": rejection(null, "p_chi2"),
        "chi2_power_linked": rejection(linked, "p_chi2"),
        "chi2_power_mild": rejection(mild, "p_chi2"),
        "bootstrap_false_rejection": rejection(
            [r for r in null if "p_bootstrap" in r], "p_bootstrap"
        ),
        "chi2_false_rejection_bootstrap_sets": rejection(
            [r for r in null if "p_bootstrap" in r], "p_chi2"
        ),
        # the workflow flags a tree whose null fit has a rate at the lower bound: there the
        # bootstrap simulates data that never make that change
        "bootstrap_false_rejection_null_rates_inside": rejection(
            [r for r in null if "p_bootstrap" in r and not r["null_at_lower_bound"]], "p_bootstrap"
        ),
        "chi2_false_rejection_same_sets": rejection(
            [r for r in null if "p_bootstrap" in r and not r["null_at_lower_bound"]], "p_chi2"
        ),
        "bootstrap_false_rejection_null_rate_at_bound": rejection(
            [r for r in null if "p_bootstrap" in r and r["null_at_lower_bound"]], "p_bootstrap"
        ),
        # null rates at or near the lower bound (moved to their interval edge for simulating)
        "bootstrap_false_rejection_null_rates_moved": rejection(
            [r for r in null if "p_bootstrap" in r and r["null_rates_moved"]], "p_bootstrap"
        ),
        "bootstrap_false_rejection_no_rate_moved": rejection(
            [r for r in null if "p_bootstrap" in r and not r["null_rates_moved"]], "p_bootstrap"
        ),
        "bootstrap_power_mild": rejection([r for r in mild if "p_bootstrap" in r], "p_bootstrap"),
        "bootstrap_power_mild_at_estimate": rejection(
            [r for r in mild if "p_bootstrap_at_estimate" in r], "p_bootstrap_at_estimate"
        ),
        "chi2_power_mild_same_sets": rejection([r for r in mild if "p_bootstrap" in r], "p_chi2"),
        "mean_statistic_under_null": float(np.mean([r["statistic"] for r in null])),
        "median_fit_cpu_seconds": float(np.median([r["fit_cpu_seconds"] for r in results])),
        "median_bootstrap_cpu_seconds_per_replicate": float(
            np.median([r["bootstrap_cpu_seconds"] / a.replicates for r in booted] or [np.nan])
        ),
        "total_cpu_seconds": round(
            sum(r["fit_cpu_seconds"] + r.get("bootstrap_cpu_seconds", 0.0) for r in results), 1
        ),
    }
    if a.simulate_from == "both":
        # the first release's way (simulated at the estimates) on the same data sets
        est = [r for r in null if "p_bootstrap_at_estimate" in r]
        report["at_estimate_false_rejection"] = rejection(est, "p_bootstrap_at_estimate")
        report["at_estimate_false_rejection_null_rate_at_bound"] = rejection(
            [r for r in est if r["null_at_lower_bound"]], "p_bootstrap_at_estimate"
        )
        report["at_estimate_false_rejection_null_rates_moved"] = rejection(
            [r for r in est if r["null_rates_moved"]], "p_bootstrap_at_estimate"
        )
        report["at_estimate_false_rejection_no_rate_moved"] = rejection(
            [r for r in est if not r["null_rates_moved"]], "p_bootstrap_at_estimate"
        )
    sims = [x for r in null if "simulated" in r for x in r["simulated"]]
    if sims:
        # how the pooled bootstrap null compares with chi-square on 4 df
        report["bootstrap_null_mean_statistic"] = float(np.mean(sims))
        report["bootstrap_null_fraction_above_chi2_point"] = float(
            np.mean(np.asarray(sims) > chi2.isf(ALPHA, 4))
        )
    print(json.dumps(report, indent=2))
    if a.out:
        Path(a.out).write_text(json.dumps({"summary": report, "results": results}, indent=1))
    return 0


if __name__ == "__main__":
    sys.exit(main())
