# Do two traits evolve together? Tests between the hypotheses of each trait pair.
# The hypotheses themselves are fitted by the ordinary fit rule (analysis = pair
# name). Here: a parametric bootstrap per pair x chunk of trees (only for pairs
# with bootstrap > 0), one summary job and one plot job per pair. The job count
# grows with trees / per_job, never with the number of trees itself.

PAIRS = config["pairs"]


wildcard_constraints:
    pair=r"[A-Za-z0-9_.\-]+",


def pair_bootstrap_files(wildcards):
    return [
        f"{OUT}/pairs/{p}/bootstrap/chunk_{c}.tsv"
        for p, spec in PAIRS.items()
        if spec["bootstrap"] > 0
        for c in chunk_ids()
    ]


def pair_chunk_fits(kind):
    """Input function: one chunk's fit tables ('fits' or 'rates') of every hypothesis of a pair."""

    def files(wildcards):
        return [
            f"{OUT}/fits/{wildcards.pair}/{h}/chunk_{wildcards.chunk}.{kind}.tsv"
            for h in ANALYSES[wildcards.pair]
        ]

    return files


def pair_params(wildcards):
    return {"pair": wildcards.pair, "config": config}


def pair_bootstrap_runtime(wildcards, attempt):
    """Minutes for one chunk: about 0.1 s per simulated data set at 100 tips
    (two fits of 5 starts), for each test on each bootstrapped tree of the chunk,
    with a wide margin."""
    spec = PAIRS[wildcards.pair]
    per_chunk = min(spec["bootstrap_trees"], config["trees"]["per_job"])
    n_tests = max(1, len(ANALYSES[wildcards.pair]) * (len(ANALYSES[wildcards.pair]) - 1) // 2)
    return 10 + attempt * int(per_chunk * n_tests * spec["bootstrap"] * 0.5 / 60)


PAIR_PLOTS = ["diagram", "tests"]


def pair_targets(wildcards):
    if not PAIRS:
        return []
    return [
        f"{OUT}/tables/pair_tests.tsv",
        f"{OUT}/tables/pair_summary.tsv",
    ] + [f"{OUT}/plots/pairs/{p}.{kind}.{ext}" for p in PAIRS for kind in PAIR_PLOTS
         for ext in ("png", "svg")]


TARGET_FUNCTIONS.append(pair_targets)


rule pair_bootstrap:
    input:
        trees=f"{OUT}/prepared/trees/chunk_{{chunk}}.npz",
        traits=f"{OUT}/prepared/traits.json",
        used=f"{OUT}/tables/trees_used.tsv",
        fits=pair_chunk_fits("fits"),
        rates=pair_chunk_fits("rates"),
    output:
        f"{OUT}/pairs/{{pair}}/bootstrap/chunk_{{chunk}}.tsv",
    params:
        job=pair_params,
    resources:
        runtime=pair_bootstrap_runtime,
        mem_mb=1000,
    log:
        f"{OUT}/logs/pairs/{{pair}}/bootstrap_chunk_{{chunk}}.log",
    conda:
        ENV
    script:
        "../../scripts/pair_bootstrap.py"


rule pair_summary:
    input:
        fits=f"{OUT}/tables/fits.tsv",
        traits=f"{OUT}/prepared/traits.json",
        bootstrap=pair_bootstrap_files,
    output:
        tests=report(
            f"{OUT}/tables/pair_tests.tsv",
            caption="../report/pair_tests.rst",
            category="Trait pairs",
        ),
        summary=report(
            f"{OUT}/tables/pair_summary.tsv",
            caption="../report/pair_summary.rst",
            category="Trait pairs",
        ),
        bootstrap=f"{OUT}/tables/pair_bootstrap.tsv",
    params:
        config=config,
    log:
        f"{OUT}/logs/pairs/pair_summary.log",
    conda:
        ENV
    script:
        "../../scripts/pair_summary.py"


rule plot_pair:
    input:
        tests=f"{OUT}/tables/pair_tests.tsv",
        summary=f"{OUT}/tables/pair_summary.tsv",
        bootstrap=f"{OUT}/tables/pair_bootstrap.tsv",
        rates=f"{OUT}/tables/rate_summary.tsv",
        support=f"{OUT}/tables/model_support.tsv",
        traits=f"{OUT}/prepared/traits.json",
    output:
        **{
            f"{kind}_{ext}": report(
                f"{OUT}/plots/pairs/{{pair}}.{kind}.{ext}",
                caption=f"../report/pair_plot_{kind}.rst",
                category="Trait pairs",
                subcategory="{pair}",
            )
            for kind in PAIR_PLOTS
            for ext in ("png", "svg")
        },
    params:
        job=pair_params,
    log:
        f"{OUT}/logs/pairs/{{pair}}/plot.log",
    conda:
        ENV
    script:
        "../../scripts/plot_pair.py"
