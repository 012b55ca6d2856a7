# Shared definitions and input functions.
import glob
import json
import math
import os
import sys

from mkforest.data.config import analyses, tree_sets
from mkforest.errors import InputError
from mkforest.jobs.analyses import (
    check_config,
    hidden_class_models,
    model_treatment,
    unit_branches_only,
)
from mkforest.jobs.shaping import ancestral_job_config, fit_job_config, fit_job_weight
from mkforest.jobs.scripting import cancel_scheduler_timers

# Check the config (schema, names, and every model against the trait table when
# the table exists) before any job runs. Every mistake is reported at once, one
# sentence per line, and the run stops with status 2 without the workflow
# engine's traceback or wrapper text around our sentences.
_CONFIG_SOURCE = (
    f"config file '{workflow.config_settings.configfiles[-1]}'"
    if workflow.config_settings.configfiles
    else "config"
)
# The demo's data files, written by rule make_demo_data (prepare.smk) when missing.
DEMO_DATA = {
    "trees": "demo/data/trees.nex",
    "traits": "demo/data/traits.tsv",
    "truth": "demo/data/truth.yaml",
    "true_tree": "demo/data/true_tree.nwk",
    "molecular": "demo/data/trees_molecular.nex",
}
try:
    config = check_config(config, _CONFIG_SOURCE, made=DEMO_DATA.values())
except InputError as exc:
    for line in str(exc).splitlines():
        print(f"mkforest: {line}", file=sys.stderr)
    sys.exit(2)

OUT = f"results/{config['run']}"
ANALYSES = analyses(config)
TREE_SETS = tree_sets(config)
FIRST_SET = next(iter(TREE_SETS))
ENV = "../../envs/mkforest.yaml"


def figure(path, caption, category, **kwargs):
    """A figure output: its PNG goes into the HTML report, its SVG (for print) only to
    disk, so the report carries each figure once (report size)."""
    if str(path).endswith(".svg"):
        return path
    return report(path, caption=caption, category=category, **kwargs)


def stable(value):
    """Dicts with sorted keys, recursively: Snakemake reruns a job when its params
    change, and the order of keys in a YAML file must not count as a change."""
    if isinstance(value, dict):
        return {k: stable(value[k]) for k in sorted(value)}
    if isinstance(value, list):
        return [stable(v) for v in value]
    return value


wildcard_constraints:
    analysis=r"[A-Za-z0-9_.\-]+",
    model=r"[A-Za-z0-9_.\-]+",
    chunk=r"\d+",


def chunk_ids(wildcards=None, first_set_only=False):
    """Chunk numbers written by the prepare_trees checkpoint (every tree set's, numbered
    on from one set to the next; with first_set_only, those of the first set)."""
    folder = checkpoints.prepare_trees.get().output.chunks
    ids = sorted(glob_wildcards(os.path.join(folder, "chunk_{chunk}.npz")).chunk)
    if first_set_only:
        with open(os.path.join(folder, "sets.json")) as fh:
            first = set(json.load(fh)[FIRST_SET])
        ids = [c for c in ids if c in first]
    return ids


def fit_files(kind):
    """Input function: every fit job's table of one kind ('fits' or 'rates')."""

    def files(wildcards):
        return [
            f"{OUT}/fits/{a}/{m}/chunk_{c}.{kind}.tsv"
            for a, models in ANALYSES.items()
            for m in models
            for c in chunk_ids()
        ]

    return files


def fit_params(wildcards):
    """The part of the config one fit job depends on (and nothing more, so that
    adding a model or a trait does not rerun the other fits)."""
    return stable(fit_job_config(config, wildcards.analysis, wildcards.model))


# Fits that can run at once: cores on one machine; on a cluster, submissions in
# flight (jobs) x fits side by side in each (cores, the node size).
FIT_SLOTS = (workflow._cores or 1) * (workflow.nodes or 1)
# Memory of one fit job (measured peak: docs/cluster.md, "How the work divides at scale").
FIT_MEM_MB = 1000


def _default_mem_mb():
    try:
        value = workflow.resource_settings._parsed_default_resources.get("mem_mb").value
        return int(value) if isinstance(value, (int, float)) else 0
    except Exception:
        return 0


onstart:
    # On SLURM, a submission larger than every node would wait for ever: say so now.
    from mkforest.jobs.cluster import group_request, query_nodes, request_problem

    plugin = getattr(workflow.executor_plugin, "name", "") or ""
    if plugin.split("-")[-1] == "slurm":
        size = dict(workflow.group_settings.group_components).get("fit", 1)
        asked = group_request(size, workflow._cores, FIT_MEM_MB, _default_mem_mb())
        nodes = query_nodes()
        problem = (
            request_problem(*asked, nodes, size, workflow._cores) if nodes else None
        )
        if problem:
            raise WorkflowError(problem)


def tree_layout():
    """{per_job, trees, tips} written by prepare_trees (per_job as chosen for 'auto')."""
    folder = checkpoints.prepare_trees.get().output.chunks
    with open(os.path.join(folder, "layout.json")) as fh:
        return json.load(fh)


def trees_per_job():
    """Trees per chunk: the largest per_job of the tree sets, or what prepare_trees chose
    for 'auto' (the first set's)."""
    given = [
        s["per_job"] for s in TREE_SETS.values() if s.get("per_job", "auto") != "auto"
    ]
    if len(given) == len(TREE_SETS):
        return max(given)
    return max(given + [tree_layout()["per_job"]])


def fit_runtime(wildcards, attempt):
    """Minutes for one fit job: 0.5 s per tree at 200 tips (measured: 3-60 ms per fit
    with adaptive starts, benchmarks/bench_reference.py; pairs cost more), plus 2 min.
    """
    per_tree = 0.5 * max(1.0, tree_layout()["tips"] / 200)
    return 2 + attempt * math.ceil(trees_per_job() * per_tree / 60)


PLOTS = ["support_weights", "support_heatmap"]
# Rates across trees: one figure per analysis (an analysis too tall for a page in parts),
# PNG and SVG, in one folder: their number follows the traits' states.
RATE_PAGES = f"{OUT}/plots/rates_across_trees"
# The treatment and tree-set figure is drawn only when there is something to compare:
# two tree sets, or models of one trait with different branch-length treatments.
BRANCH_PLOTS = (
    [f"{OUT}/plots/support_branches.png", f"{OUT}/plots/support_branches.svg"]
    if len(TREE_SETS) > 1
    or any(
        len({model_treatment(config, m) for m in models}) > 1
        for a, models in ANALYSES.items()
        if a in config["traits"]["columns"]
    )
    else []
)

# Rule files of later stages (ancestral states, pairs, report) append input
# functions here; each returns the final outputs of that stage.
TARGET_FUNCTIONS = []


def all_targets(wildcards):
    extra = [f for fn in TARGET_FUNCTIONS for f in fn(wildcards)]
    return (
        extra
        + [
            f"{OUT}/tables/fits.tsv",
            f"{OUT}/tables/rates.tsv",
            f"{OUT}/tables/model_support.tsv",
            f"{OUT}/tables/rate_summary.tsv",
            f"{OUT}/tables/data_check.tsv",
            f"{OUT}/tables/treatment_support.tsv",
            f"{OUT}/tables/branch_tests.tsv",
            f"{OUT}/tables/branch_test_summary.tsv",
            f"{OUT}/tables/tree_set_support.tsv",
        ]
        + BRANCH_PLOTS
        + [f"{OUT}/plots/{p}.{ext}" for p in PLOTS for ext in ("png", "svg")]
        + [RATE_PAGES]
    )
