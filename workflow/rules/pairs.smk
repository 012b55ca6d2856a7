# Do two traits evolve together? Tests between the hypotheses of each trait pair.
# The hypotheses themselves are fitted by the ordinary fit rule (analysis = pair
# name). Here: a parametric bootstrap per pair x chunk of trees (only for pairs
# with bootstrap > 0), one summary job and one plot job for every pair. The job count
# grows with trees / per_job, never with the number of trees itself.


include: "pairs_inputs.smk"


rule pair_bootstrap:
    input:
        trees=f"{OUT}/prepared/trees/chunk_{{chunk}}.npz",
        traits=f"{OUT}/prepared/traits.json",
        used=f"{OUT}/tables/trees_used.tsv",
        fits=pair_chunk_fits("fits"),
        rates=pair_chunk_fits("rates"),
    output:
        f"{OUT}/pairs/{{pair}}/bootstrap/chunk_{{chunk}}.tsv",
    log:
        f"{OUT}/logs/pairs/{{pair}}/bootstrap_chunk_{{chunk}}.log",
    conda:
        ENV
    resources:
        runtime=pair_bootstrap_runtime,
        mem_mb=1000,
    params:
        job=pair_params,
    script:
        "../../scripts/pair_bootstrap.py"


rule pair_summary:
    input:
        fits=f"{OUT}/tables/fits.tsv",
        traits=f"{OUT}/prepared/traits.json",
        bootstrap=pair_bootstrap_files,
    output:
        tests=f"{OUT}/tables/pair_tests.tsv",  # on disk; its summary is in the report
        summary=report(
            f"{OUT}/tables/pair_summary.tsv",
            caption="../report/pair_summary.rst",
            category="Trait pairs",
        ),
        bootstrap=f"{OUT}/tables/pair_bootstrap.tsv",
    log:
        f"{OUT}/logs/pairs/pair_summary.log",
    conda:
        ENV
    params:
        config=stable(config),
    script:
        "../../scripts/pair_summary.py"


rule plot_pairs:
    input:
        tests=f"{OUT}/tables/pair_tests.tsv",
        summary=f"{OUT}/tables/pair_summary.tsv",
        bootstrap=f"{OUT}/tables/pair_bootstrap.tsv",
        rates=f"{OUT}/tables/rates.tsv",
        support=f"{OUT}/tables/model_support.tsv",
        traits=f"{OUT}/prepared/traits.json",
    output:
        **{
            kind: report(
                directory(PAIR_PAGES[kind]),
                patterns=["{name}.png"],
                caption=f"../report/pair_plot_{kind}.rst",
                category="Trait pairs",
            )
            for kind in PAIR_PLOTS
        },
    log:
        f"{OUT}/logs/pairs/plot.log",
    conda:
        ENV
    params:
        pairs=stable(PAIRS),
    script:
        "../../scripts/plot_pair.py"
