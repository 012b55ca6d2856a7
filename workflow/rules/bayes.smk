# Bayesian estimation: one sampling job per analysis x model x chunk of the first tree
# set (only chunks holding a tree that bayes.trees picks), one summary job for the
# tables and draws files, one figure job for every analysis (a folder per kind of figure).
# The job count grows with trees / per_job, never with the number of trees itself.


include: "bayes_inputs.smk"


rule bayes_chunk:
    input:
        trees=f"{OUT}/prepared/trees/chunk_{{chunk}}.npz",
        traits=f"{OUT}/prepared/traits.json",
        used=f"{OUT}/tables/trees_used.tsv",
    output:
        rates=f"{OUT}/bayes/{{analysis}}/{{model}}/chunk_{{chunk}}.rates.tsv",
        ml=f"{OUT}/bayes/{{analysis}}/{{model}}/chunk_{{chunk}}.ml.tsv",
        draws=f"{OUT}/bayes/{{analysis}}/{{model}}/chunk_{{chunk}}.draws.npz",
    log:
        f"{OUT}/logs/bayes/{{analysis}}/{{model}}/chunk_{{chunk}}.log",
    priority: lambda wildcards: fit_job_weight(config, wildcards.analysis, wildcards.model)
    group:
        "bayes"
    conda:
        ENV
    resources:
        runtime=bayes_runtime,
        mem_mb=FIT_MEM_MB,
    params:
        job=bayes_params,
        tree_set=FIRST_SET,
    script:
        "../../scripts/bayes_chunk.py"


rule bayes_summary:
    input:
        rates=bayes_files("rates.tsv"),
        ml=bayes_files("ml.tsv"),
        draws=bayes_files("draws.npz"),
        traits=f"{OUT}/prepared/traits.json",  # the headers as written
    output:
        posterior_rates=f"{OUT}/tables/posterior_rates.tsv",  # on disk; summarised below
        summary=report(
            f"{OUT}/tables/posterior_summary.tsv",
            caption="../report/posterior_summary.rst",
            category="Bayesian estimation",
        ),
        marginal=report(
            f"{OUT}/tables/marginal_likelihoods.tsv",
            caption="../report/marginal_likelihoods.rst",
            category="Bayesian estimation",
        ),
        support=report(
            f"{OUT}/tables/bayes_model_support.tsv",
            caption="../report/bayes_model_support.rst",
            category="Bayesian estimation",
        ),
        draws=[f"{OUT}/posterior/{a}.nc" for a in BAYES],
    log:
        f"{OUT}/logs/bayes/summary.log",
    conda:
        ENV
    params:
        analyses=BAYES,
        pairs=list(config["pairs"]),
        settings=bayes_settings,
    script:
        "../../scripts/bayes_summary.py"


rule plot_bayes:
    input:
        rates=f"{OUT}/tables/posterior_rates.tsv",
        summary=f"{OUT}/tables/posterior_summary.tsv",
        draws=[f"{OUT}/posterior/{a}.nc" for a in BAYES],
        marginal=f"{OUT}/tables/marginal_likelihoods.tsv",
        support=f"{OUT}/tables/bayes_model_support.tsv",
        traits=f"{OUT}/prepared/traits.json",  # the headers as written
    output:
        rates=report(
            directory(BAYES_PAGES["posterior_rates"]),
            patterns=["{name}.png"],
            caption="../report/posterior_rates_plot.rst",
            category="Bayesian estimation",
        ),
        models=report(
            directory(BAYES_PAGES["model_probabilities"]),
            patterns=["{name}.png"],
            caption="../report/model_probabilities_plot.rst",
            category="Bayesian estimation",
        ),
    log:
        f"{OUT}/logs/bayes/plot.log",
    conda:
        ENV
    params:
        models=BAYES,
        pair_traits={
            a: config["pairs"][a]["traits"] for a in BAYES if a in config["pairs"]
        },
    script:
        "../../scripts/plot_bayes.py"
