# Ancestral states and stochastic maps across the tree sample.
# One job for the clades to report, one job per analysis x chunk of trees, one
# summary job and one plot job: the job count grows with trees / per_job, never
# with the number of trees itself.


include: "ancestral_inputs.smk"


rule ancestral_clades:
    input:
        chunks=prepared_tree_chunks,
        reference=ANC["reference_tree"] or [],
    output:
        clades=report(
            f"{OUT}/tables/clades.tsv",
            caption="../report/clades.rst",
            category="Ancestral states",
        ),
        tree=f"{OUT}/ancestral/summary_tree.nwk",
    log:
        f"{OUT}/logs/ancestral_clades.log",
    conda:
        ENV
    params:
        clades=ANC["clades"],
        reference=ANC["reference_tree"],
        summary=ANC["summary_tree"],
    script:
        "../../scripts/ancestral_clades.py"


rule ancestral_chunk:
    input:
        trees=f"{OUT}/prepared/trees/chunk_{{chunk}}.npz",
        traits=f"{OUT}/prepared/traits.json",
        clades=f"{OUT}/tables/clades.tsv",
        fits=ancestral_chunk_inputs("fits"),
        rates=ancestral_chunk_inputs("rates"),
    output:
        f"{OUT}/ancestral/{{analysis}}/chunk_{{chunk}}.npz",
    log:
        f"{OUT}/logs/ancestral/{{analysis}}/chunk_{{chunk}}.log",
    conda:
        ENV
    resources:
        runtime=ancestral_runtime,
        mem_mb=1000,
    params:
        job=ancestral_params,
    script:
        "../../scripts/ancestral_chunk.py"


rule ancestral_summary:
    input:
        chunks=ancestral_chunk_files,
        clades=f"{OUT}/tables/clades.tsv",
        used=f"{OUT}/tables/trees_used.tsv",
        traits=f"{OUT}/prepared/traits.json",  # the headers as written
    output:
        states=f"{OUT}/tables/ancestral_states.tsv",  # on disk; its summary is in the report
        transitions=report(
            f"{OUT}/tables/transitions.tsv",
            caption="../report/transitions.rst",
            category="Ancestral states",
        ),
        times=report(
            f"{OUT}/tables/state_times.tsv",
            caption="../report/state_times.rst",
            category="Ancestral states",
        ),
        per_tree=f"{OUT}/tables/transitions_per_tree.tsv",  # on disk; its summary is in the report
        classes=report(
            f"{OUT}/tables/ancestral_classes.tsv",
            caption="../report/ancestral_classes.rst",
            category="Ancestral states",
        ),
    log:
        f"{OUT}/logs/ancestral_summary.log",
    conda:
        ENV
    params:
        analyses=list(ANALYSES),
    script:
        "../../scripts/ancestral_summary.py"


rule plot_ancestral:
    input:
        states=f"{OUT}/tables/ancestral_states.tsv",
        clades=f"{OUT}/tables/clades.tsv",
        per_tree=f"{OUT}/tables/transitions_per_tree.tsv",
        classes=f"{OUT}/tables/ancestral_classes.tsv",
        tree=f"{OUT}/ancestral/summary_tree.nwk",
        traits=f"{OUT}/prepared/traits.json",
    output:
        trees=report(
            directory(ANCESTRAL_TREE_PAGES),
            patterns=["{name}.png"],
            caption="../report/ancestral_tree.rst",
            category="Ancestral states",
        ),
        class_trees=[
            report(
                directory(p),
                patterns=["{name}.png"],
                caption="../report/class_tree.rst",
                category="Ancestral states",
            )
            for p in CLASS_TREE_PAGES
        ],
        changes=report(
            directory(CHANGE_PAGES),
            patterns=["{name}.png"],
            caption="../report/changes.rst",
            category="Ancestral states",
        ),
    log:
        f"{OUT}/logs/plot_ancestral.log",
    conda:
        ENV
    params:
        analyses=list(ANALYSES),
        hidden=HIDDEN_CLASS_MODELS,
        rooting=next(iter(TREE_SETS.values())).get("root"),
        setup=stable(
            {
                "traits": {"columns": config["traits"]["columns"]},
                "models": config["models"],
                "pairs": config["pairs"],
            }
        ),
    script:
        "../../scripts/plot_ancestral.py"


rule ancestral:
    """Only the ancestral-state outputs: snakemake ancestral"""
    input:
        ancestral_targets,
