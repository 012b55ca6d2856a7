"""Simulation-based calibration of the Bayesian room (Talts, Betancourt, Simpson,
Vehtari & Gelman 2018).

    .venv/bin/python benchmarks/calibration_bayes.py [--replicates 200] [--out calibration_bayes.png]

For each replicate: scaled rates drawn from the prior (exponential, mean 1 change along
the height), a binary trait simulated on a fixed 40-tip pure-birth tree of height 1,
``sample_posterior`` at its defaults (4 chains, 500 warm-up and 500 draws each), the
draws thinned to L = 99 (every 20th of the 2,000 kept: below the effective sample size,
so the ranks are nearly independent draws, as Talts et al. advise), and the rank of the true rate among
them (0..99). If the sampler and the density are right, the ranks are uniform over the
replicates. Two models: equal rates (one rate) and unconstrained (two rates). The
figure shows each parameter's rank histogram (20 bins) with the band holding 99% of a
bin's counts under uniformity (binomial quantiles); the script prints a chi-square test
of uniformity per parameter.
"""

from __future__ import annotations

import os

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_var] = "1"

import argparse  # noqa: E402

import numpy as np  # noqa: E402
from bench_mapping import pure_birth_tree  # noqa: E402

from mkforest.engine.bayes import Prior, sample_posterior  # noqa: E402
from mkforest.engine.models import build_model  # noqa: E402
from mkforest.engine.simulate import simulate_states, tip_partials_from_states  # noqa: E402

N_TIPS = 40
THIN = 99
BINS = 20


def ranks(kind: str, replicates: int, seed: int = 2018):
    """(labels, ranks [replicates, n_params] in 0..THIN, flagged count)."""
    rng = np.random.default_rng(seed)
    tree = pure_birth_tree(np.random.default_rng(seed + 1), N_TIPS, height=1.0)
    model = build_model(kind, ("a", "b"))
    prior = Prior()
    out = np.empty((replicates, model.n_params), dtype=int)
    flagged = 0
    for i in range(replicates):
        truth = prior.draw(rng, model.n_params) / tree.height
        states = simulate_states(tree, model.q_matrix(truth), rng)
        X = tip_partials_from_states(states, tree.n_tips, 2)
        post = sample_posterior(tree, X, model, prior=prior, seed=i)
        flagged += post.flagged
        draws = post.draws.reshape(-1, model.n_params)
        keep = draws[np.linspace(0, len(draws) - 1, THIN).astype(int)]
        out[i] = (keep < truth).sum(axis=0)
    return model.labels, out, flagged


def uniformity_p(r):
    """Chi-square test of the rank histogram (BINS bins) against uniform counts."""
    from scipy.stats import chisquare

    counts = np.histogram(r, bins=BINS, range=(0, THIN + 1))[0]
    return float(chisquare(counts).pvalue)


def figure(results, path):
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    from scipy.stats import binom

    panels = [
        (kind, lab, r[:, j]) for kind, (labels, r, _) in results for j, lab in enumerate(labels)
    ]
    fig, axes = plt.subplots(1, len(panels), figsize=(3.4 * len(panels), 3.0), sharey=True)
    for ax, (kind, lab, r) in zip(np.atleast_1d(axes), panels):
        n = len(r)
        lo, hi = binom.ppf([0.005, 0.995], n, 1 / BINS)
        ax.axhspan(lo, hi, color="0.88", zorder=0)
        ax.axhline(n / BINS, color="0.55", lw=0.8, zorder=1)
        ax.hist(r, bins=BINS, range=(0, THIN + 1), color="#3b6e8f", edgecolor="white", zorder=2)
        ax.set_title(f"{kind}: {lab}\nchi-square p = {uniformity_p(r):.2f}", fontsize=9)
        ax.set_xlabel(f"rank of the true rate among {THIN} draws", fontsize=8)
    np.atleast_1d(axes)[0].set_ylabel("replicates", fontsize=8)
    fig.suptitle(
        f"Simulation-based calibration, {len(panels[0][2])} replicates per model "
        "(band: 99% of a bin's counts under uniform ranks)",
        fontsize=9,
    )
    fig.tight_layout()
    fig.savefig(path, dpi=130)


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--replicates", type=int, default=200)
    ap.add_argument("--out", default="calibration_bayes.png")
    args = ap.parse_args()
    results = []
    for kind in ("equal", "unconstrained"):
        labels, r, flagged = ranks(kind, args.replicates)
        results.append((kind, (labels, r, flagged)))
        for j, lab in enumerate(labels):
            print(f"{kind:<14}{lab:<8} chi-square p = {uniformity_p(r[:, j]):.3f}")
        print(f"{kind:<14}flagged runs: {flagged} of {args.replicates}")
    figure(results, args.out)
    print(f"figure: {args.out}")


if __name__ == "__main__":
    main()
