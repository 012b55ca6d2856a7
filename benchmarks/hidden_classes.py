"""Hidden rate classes: recovery of a two-speed trait, and pair tests under a burst.

Recovery (``--recovery``): a binary trait simulated with two hidden rate classes
(class 1 changes at 0.3 per tree height each way, class 2 at 6, switching at 0.5
each way; root from the stationary distribution) on one 300-tip pure-birth tree,
many times. Each data set is fitted with equal rates, unconstrained rates and
unconstrained rates with two classes and one switching rate (the simulated
structure), each as the workflow fits them (fit_model, 5 starts, uniform root).
Reported: on how many data sets the two-class model has the highest AICc weight,
its mean weight, and the median (2.5%, 97.5%) of its recovered rates.

Calibration (``--calibration``): two binary traits simulated independently on one
100-tip pure-birth tree (each at 0.5 per tree height each way) except that the
branches of one clade of about a quarter of the tips evolve ``--burst`` times
faster in both traits (a burst of change in one clade; the traits never depend
on each other). Each data set is tested independent vs dependent (Pagel 1994)
by the chi-square likelihood-ratio test, once with the plain hypotheses (4 df)
and once with two hidden rate classes in both (8 df; Boyko & Beaulieu 2021
propose the hidden-class null for this). Reported: false rejections at alpha =
0.05 with counts and exact 95% intervals (Clopper-Pearson, scipy.stats.binomtest).

Work is spread over ``--workers`` processes; every data set's seed derives from
(seed, section, data set), so the figures do not depend on the number of workers.

Run:  python benchmarks/hidden_classes.py --recovery --calibration --figure calibration.png
      python benchmarks/hidden_classes.py --calibration --sets 10   (a quick look)
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
from mkforest.data.trees import TreeArrays, parse_newick  # noqa: E402
from mkforest.demo import newick, yule_tree  # noqa: E402
from mkforest.engine import pairs  # noqa: E402
from mkforest.engine.compare import akaike_weights, information_criteria  # noqa: E402
from mkforest.engine.fitting import fit_model  # noqa: E402
from mkforest.engine.hidden import with_hidden_classes  # noqa: E402
from mkforest.engine.models import build_model  # noqa: E402
from mkforest.engine.simulate import simulate_states  # noqa: E402
from mkforest.seeds import derive_seed  # noqa: E402

ALPHA = 0.05
STARTS = 5
SLOW, FAST, SWITCH = 0.3, 6.0, 0.5
PAIR_RATE = 0.5
_STATE = {}


def pure_birth(n_tips, seed, prefix="sp"):
    rng = np.random.default_rng(seed)
    names = [f"{prefix}{i:03d}" for i in range(n_tips)]
    return parse_newick(newick(yule_tree(names, rng, height=1.0)))


def burst_tree(tree, lo=0.2, hi=0.35, factor=10.0):
    """(tree with the branches at and below one clade of lo..hi of the tips lengthened
    ``factor`` times -- the same as rates ``factor`` times faster there, clade size)."""
    sizes = np.array([len(s) for s in tree.tip_sets()])
    inside = [
        v
        for v in range(tree.n_tips, tree.n_nodes - 1)
        if lo * tree.n_tips <= sizes[v] <= hi * tree.n_tips
    ]
    v = max(inside, key=lambda u: sizes[u])
    below = np.zeros(tree.n_nodes, bool)
    below[v] = True
    for u in range(tree.n_nodes - 2, -1, -1):  # preorder: parents before children
        if tree.parent[u] >= 0 and below[tree.parent[u]]:
            below[u] = True
    length = np.where(below, tree.length * factor, tree.length)
    return TreeArrays(
        tree.tip_labels, tree.parent, length, tree.child_ptr, tree.children, tree.index
    ), int(sizes[v])


def _init(section, seed, burst):
    _STATE.clear()
    if section == "recovery":
        tree = pure_birth(300, seed)
        base = build_model("unconstrained", ("0", "1"))
        two = with_hidden_classes(base, 2, "equal", "two_classes")
        truth = np.array(
            [
                SLOW if lab.endswith("@1") else FAST if lab.endswith("@2") else SWITCH
                for lab in two.labels
            ]
        )
        _STATE.update(
            tree=tree,
            models=[build_model("equal", ("0", "1")), base, two],
            q=two.q_matrix(truth),
            truth=dict(zip(two.labels, truth)),
        )
    else:
        tree = pure_birth(100, seed)
        fast_tree, size = burst_tree(tree, factor=burst)
        names = list(tree.tip_labels)
        first = trait_from_mapping(
            "lure", {t: ("dim", "bright")[i % 2] for i, t in enumerate(names)}
        )
        second = trait_from_mapping(
            "ridge", {t: ("smooth", "keeled")[i % 2] for i, t in enumerate(names)}
        )
        pair = pairs.make_pair("lure_ridge", first, second)
        ind, dep = (pairs.hypothesis_model(pair, h) for h in ("independent", "dependent"))
        ind2, dep2 = (with_hidden_classes(m, 2, "equal") for m in (ind, dep))
        _STATE.update(
            tree=tree,
            fast_tree=fast_tree,
            clade_size=size,
            pair=pair,
            plain=(ind, dep),
            hidden=(ind2, dep2),
            df=(dep.n_params - ind.n_params, dep2.n_params - ind2.n_params),
        )


def recovery_set(i):
    s = _STATE
    seed = derive_seed(s["seed"], "recovery", i)
    rng = np.random.default_rng(seed)
    states = simulate_states(s["tree"], s["q"], rng) % 2
    X = np.eye(2)[states[: s["tree"].n_tips]]
    fits = [fit_model(s["tree"], X, m, n_starts=STARTS, seed=seed) for m in s["models"]]
    n = s["tree"].n_tips
    aicc = [information_criteria(f.log_likelihood, f.n_params, n)["aicc"] for f in fits]
    w = akaike_weights(np.array(aicc))
    two = fits[2]
    return {
        "i": i,
        "weights": w.tolist(),
        "best": int(np.argmax(w)),
        "log_likelihoods": [f.log_likelihood for f in fits],
        "rates": dict(zip(two.labels, two.rates.tolist())),
        "converged": two.converged,
        "at_upper": list(two.at_upper),
        "at_lower": list(two.at_lower),
        "n_state1": int(states[:n].sum()),
    }


def calibration_set(i):
    s = _STATE
    seed = derive_seed(s["seed"], "calibration", i)
    rng = np.random.default_rng(seed)
    q = np.array([[-PAIR_RATE, PAIR_RATE], [PAIR_RATE, -PAIR_RATE]])
    a = simulate_states(s["fast_tree"], q, rng)[: s["tree"].n_tips]
    b = simulate_states(s["fast_tree"], q, rng)[: s["tree"].n_tips]
    pair = s["pair"]
    none = (np.zeros(s["tree"].n_tips, bool),) * 2
    X = pairs.simulate_pair_partials(pair, s["tree"], a * 2 + b, none)
    out = {"i": i}
    for name, (null, alt), df in (
        ("plain", s["plain"], s["df"][0]),
        ("hidden", s["hidden"], s["df"][1]),
    ):
        c0 = time.process_time()
        stat, fn, fa = pairs.lr_statistic(s["tree"], X, null, alt, n_starts=STARTS, seed=seed)
        out[name] = {
            "statistic": stat,
            "p": float(chi2.sf(stat, df)),
            "df": df,
            "null_log_likelihood": fn.log_likelihood,
            "converged": bool(fn.converged and fa.converged),
            "cpu_seconds": time.process_time() - c0,
        }
    return out


def rejection(ps):
    k = int(sum(p <= ALPHA for p in ps))
    n = len(ps)
    ci = binomtest(k, n).proportion_ci(0.95)
    return {"rejected": k, "n": n, "rate": k / n, "ci95": [round(ci.low, 3), round(ci.high, 3)]}


def run(section, n_sets, workers, seed, burst):
    t0 = time.perf_counter()
    fn = recovery_set if section == "recovery" else calibration_set

    with Pool(workers, initializer=_worker_init, initargs=(section, seed, burst)) as pool:
        rows = pool.map(fn, range(n_sets), chunksize=1)
    _init(section, seed, burst)
    wall = time.perf_counter() - t0
    report = {
        "section": section,
        "sets": n_sets,
        "workers": workers,
        "wall_seconds": round(wall, 1),
        "load_average_1min_at_end": os.getloadavg()[0],
    }
    if section == "recovery":
        best = [r["best"] for r in rows]
        report.update(
            truth=_STATE["truth"],
            two_classes_best=int(sum(b == 2 for b in best)),
            best_counts={
                m.name: int(sum(b == j for b in best)) for j, m in enumerate(_STATE["models"])
            },
            mean_weight_two_classes=float(np.mean([r["weights"][2] for r in rows])),
            two_classes_converged=int(sum(r["converged"] for r in rows)),
            two_classes_rate_at_upper_bound=int(sum(bool(r["at_upper"]) for r in rows)),
            recovered={
                lab: [
                    round(float(np.quantile([r["rates"][lab] for r in rows], q)), 3)
                    for q in (0.5, 0.025, 0.975)
                ]
                for lab in _STATE["truth"]
            },
        )
    else:
        report.update(
            clade_size=_STATE["clade_size"],
            burst=burst,
            df=list(_STATE["df"]),
            plain_false_rejection=rejection([r["plain"]["p"] for r in rows]),
            hidden_false_rejection=rejection([r["hidden"]["p"] for r in rows]),
            hidden_fits_not_converged=int(sum(not r["hidden"]["converged"] for r in rows)),
            median_cpu_seconds={
                k: float(np.median([r[k]["cpu_seconds"] for r in rows]))
                for k in ("plain", "hidden")
            },
        )
    return report, rows


def _worker_init(section, seed, burst):
    _init(section, seed, burst)
    _STATE["seed"] = seed


def calibration_figure(summary, rows, path):
    """Two panels: the p-values of both tests against the uniform distribution they
    should follow (empirical CDF), and the false-rejection rate at alpha with its
    exact 95% interval."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    colours = {"plain": "#b2182b", "hidden": "#2166ac"}
    words = {
        "plain": f"plain ({summary['df'][0]} df)",
        "hidden": f"two hidden classes ({summary['df'][1]} df)",
    }
    fig, (ax1, ax2) = plt.subplots(1, 2, figsize=(9.5, 4.0), gridspec_kw={"width_ratios": [3, 2]})
    for kind in ("plain", "hidden"):
        p = np.sort([r[kind]["p"] for r in rows])
        ax1.step(
            p,
            np.arange(1, len(p) + 1) / len(p),
            where="post",
            color=colours[kind],
            label=words[kind],
        )
    ax1.plot([0, 1], [0, 1], color="#777777", ls=":", label="calibrated test")
    ax1.axvline(ALPHA, color="#444444", lw=0.8)
    ax1.set_xlabel("chi-square p-value, independent vs dependent")
    ax1.set_ylabel("fraction of data sets")
    ax1.legend(frameon=False, fontsize=8, loc="lower right")
    ax1.set_xlim(0, 1)
    ax1.set_ylim(0, 1)
    for i, kind in enumerate(("plain", "hidden")):
        rej = summary[f"{kind}_false_rejection"]
        lo, hi = rej["ci95"]
        ax2.bar(i, rej["rate"], color=colours[kind], width=0.6)
        ax2.errorbar(
            i,
            rej["rate"],
            yerr=[[rej["rate"] - lo], [hi - rej["rate"]]],
            color="black",
            capsize=5,
            lw=1,
        )
        ax2.text(
            i, hi + 0.01, f"{rej['rejected']} of {rej['n']}", ha="center", va="bottom", fontsize=8
        )
    ax2.axhline(ALPHA, color="#444444", lw=0.8, ls="--")
    ax2.text(1.45, ALPHA, f"α = {ALPHA}", va="bottom", ha="right", fontsize=8)
    ax2.set_xticks([0, 1], ["plain", "two hidden\nclasses"])
    ax2.set_ylabel(f"false rejections at α = {ALPHA} (95% interval)")
    ax2.set_ylim(0, max(0.1, summary["plain_false_rejection"]["ci95"][1] + 0.08))
    fig.suptitle(
        f"Independent traits, one clade of {summary['clade_size']} of 100 tips "
        f"{summary['burst']:g}× faster in both: {summary['sets']} data sets",
        fontsize=10,
    )
    fig.tight_layout()
    fig.savefig(path, dpi=150)
    plt.close(fig)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--recovery", action="store_true")
    ap.add_argument("--calibration", action="store_true")
    ap.add_argument(
        "--sets",
        type=int,
        default=None,
        help="data sets per section (default 50 recovery, 200 calibration)",
    )
    ap.add_argument("--burst", type=float, default=10.0, help="rate multiplier in the burst clade")
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--seed", type=int, default=2026)
    ap.add_argument("--out", default=None, help="write every result as JSON here")
    ap.add_argument("--figure", default=None, help="draw the calibration figure (PNG) here")
    ap.add_argument(
        "--from-json", default=None, help="only draw the figure from a JSON file written by --out"
    )
    a = ap.parse_args(argv)
    if a.from_json:
        saved = json.loads(Path(a.from_json).read_text())["calibration"]
        calibration_figure(saved["summary"], saved["results"], a.figure or "hidden_calibration.png")
        return 0
    everything = {}
    for section, default in (("recovery", 50), ("calibration", 200)):
        if getattr(a, section):
            report, rows = run(section, a.sets or default, a.workers, a.seed, a.burst)
            print(json.dumps(report, indent=2), flush=True)
            everything[section] = {"summary": report, "results": rows}
            if section == "calibration" and a.figure:
                calibration_figure(report, rows, a.figure)
    if a.out:
        Path(a.out).write_text(json.dumps(everything, indent=1))
    return 0


if __name__ == "__main__":
    sys.exit(main())
