# Input functions and settings of the Bayesian rules (bayes.smk).
import csv

from mkforest.data.config import bayes_analyses, bayes_trees
from mkforest.jobs.shaping import bayes_job_config

# {analysis: [models sampled]}; empty when bayes.enabled is false
BAYES = bayes_analyses(config)
# a folder per kind of figure: posterior_rates/<analysis>[.partN], and
# model_probabilities/model_probabilities[.partN] (pages of four analyses)
BAYES_PAGES = {
    kind: f"{OUT}/plots/bayes/{kind}"
    for kind in ("posterior_rates", "model_probabilities")
}


def bayes_chunks():
    """Chunks of the first tree set holding a tree that bayes.trees picks."""
    with open(checkpoints.prepare_trees.get().output.used, newline="") as fh:
        used = list(csv.DictReader(fh, delimiter="\t"))
    picked = bayes_trees(used, FIRST_SET, config["bayes"]["trees"])
    return sorted({f"{c:04d}" for _, c in picked})


def bayes_files(suffix):
    """Input function: one kind of file of every sampling job."""

    def files(wildcards):
        chunks = bayes_chunks()
        return [
            f"{OUT}/bayes/{a}/{m}/chunk_{c}.{suffix}"
            for a, models in BAYES.items()
            for m in models
            for c in chunks
        ]

    return files


def bayes_params(wildcards):
    """Only what one sampling job reads (see mkforest.data.config.bayes_job_config)."""
    return stable(bayes_job_config(config, wildcards.analysis, wildcards.model))


def bayes_settings(wildcards):
    return stable(
        {
            k: config["bayes"][k]
            for k in ("chains", "warmup", "draws", "prior", "saved_draws")
        }
    )


def bayes_runtime(wildcards, attempt):
    """Minutes for one sampling job: 5 s per tree at 200 tips (a wide margin over the
    engine's aim of 0.5 s CPU for a two-rate model), plus 2 min."""
    per_tree = 5 * max(1.0, tree_layout()["tips"] / 200)
    return 2 + attempt * math.ceil(trees_per_job() * per_tree / 60)


def bayes_targets(wildcards):
    if not BAYES:
        return []
    return (
        [
            f"{OUT}/tables/{t}.tsv"
            for t in (
                "posterior_rates",
                "posterior_summary",
                "marginal_likelihoods",
                "bayes_model_support",
            )
        ]
        + [f"{OUT}/posterior/{a}.nc" for a in BAYES]
        + list(BAYES_PAGES.values())
    )


TARGET_FUNCTIONS.append(bayes_targets)
