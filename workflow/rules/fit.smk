# One job per analysis x model x chunk of trees; one row per tree.


rule fit:
    input:
        trees=f"{OUT}/prepared/trees/chunk_{{chunk}}.npz",
        traits=f"{OUT}/prepared/traits.json",
    output:
        fits=f"{OUT}/fits/{{analysis}}/{{model}}/chunk_{{chunk}}.fits.tsv",
        rates=f"{OUT}/fits/{{analysis}}/{{model}}/chunk_{{chunk}}.rates.tsv",
    log:
        f"{OUT}/logs/fit/{{analysis}}/{{model}}/chunk_{{chunk}}.log",
    # costliest fits first (mkforest.jobs.shaping.fit_job_weight): same results, less idle time
    priority: lambda wildcards: fit_job_weight(config, wildcards.analysis, wildcards.model)
    group:
        "fit"
    conda:
        ENV
    resources:
        runtime=fit_runtime,
        mem_mb=FIT_MEM_MB,
    params:
        job=fit_params,
    script:
        "../../scripts/fit_chunk.py"
