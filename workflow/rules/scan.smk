# Which traits evolve together? Every pair of the scanned traits tested on every
# tree (independent against dependent), with false-discovery control across the
# pairs of each tree. Per chunk of trees: one job fits each trait once per tree,
# then scan.jobs_per_chunk jobs test their share of the pairs, reusing those fits.
# The job count grows with neither the trees nor the pairs beyond that grouping.


include: "scan_inputs.smk"


rule scan_singles:
    input:
        trees=f"{OUT}/prepared/trees/chunk_{{chunk}}.npz",
        traits=f"{OUT}/prepared/traits.json",
    output:
        f"{OUT}/scan/chunk_{{chunk}}.singles.tsv",
    log:
        f"{OUT}/logs/scan/chunk_{{chunk}}.singles.log",
    conda:
        ENV
    resources:
        runtime=scan_runtime,
        mem_mb=1000,
    params:
        config=scan_params,
    script:
        "../../scripts/scan_singles.py"


rule scan_pairs:
    input:
        trees=f"{OUT}/prepared/trees/chunk_{{chunk}}.npz",
        traits=f"{OUT}/prepared/traits.json",
        singles=f"{OUT}/scan/chunk_{{chunk}}.singles.tsv",
    output:
        f"{OUT}/scan/chunk_{{chunk}}.job_{{job}}.tsv",
    log:
        f"{OUT}/logs/scan/chunk_{{chunk}}.job_{{job}}.log",
    conda:
        ENV
    resources:
        runtime=scan_runtime,
        mem_mb=1000,
    params:
        config=scan_params,
        n_jobs=SCAN_JOBS,
    script:
        "../../scripts/scan_pairs.py"


rule scan_summary:
    input:
        pairs=scan_pair_files,
        traits=f"{OUT}/prepared/traits.json",  # the headers as written
    output:
        per_tree=f"{OUT}/tables/scan_per_tree.tsv",
        summary=report(
            f"{OUT}/tables/scan.tsv",
            caption="../report/scan.rst",
            category="All-pairs scan",
        ),
    log:
        f"{OUT}/logs/scan/summary.log",
    conda:
        ENV
    params:
        level=config["scan"].get("level", 0.05),
    script:
        "../../scripts/scan_summary.py"


rule plot_scan:
    input:
        summary=f"{OUT}/tables/scan.tsv",
        traits=f"{OUT}/prepared/traits.json",  # the headers as written
    output:
        png=figure(
            f"{OUT}/plots/scan.png",
            caption="../report/scan_plot.rst",
            category="All-pairs scan",
        ),
        svg=f"{OUT}/plots/scan.svg",
    log:
        f"{OUT}/logs/scan/plot.log",
    conda:
        ENV
    params:
        columns=config["traits"]["columns"],
    script:
        "../../scripts/plot_scan.py"
