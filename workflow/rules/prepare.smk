# Trees into chunks of compact arrays; traits into a coded table with a data check.


checkpoint prepare_trees:
    input:
        trees=[s["file"] for s in TREE_SETS.values()],
    output:
        chunks=directory(f"{OUT}/prepared/trees"),
        used=report(
            f"{OUT}/tables/trees_used.tsv",
            caption="../report/trees_used.rst",
            category="Data",
        ),
    log:
        f"{OUT}/logs/prepare_trees.log",
    conda:
        ENV
    resources:
        # read by trees.per_job: auto (resources are no rerun trigger, params are)
        fit_slots=FIT_SLOTS,
        fits_per_tree=sum(len(models) for models in ANALYSES.values()),
    params:
        tree_sets=stable(TREE_SETS),
        # the config's order: the first set is the one the methods text and figures describe
        tree_set_order=list(TREE_SETS),
        seed=config["seed"],
        # trees written without lengths are read with one unit per branch only when
        # every fit uses branches: unit
        no_lengths="unit" if unit_branches_only(config) else "error",
    script:
        "../../scripts/prepare_trees.py"


rule prepare_traits:
    input:
        traits=config["traits"]["file"],
        chunks=rules.prepare_trees.output.chunks,
    output:
        coded=f"{OUT}/prepared/traits.json",
        check=report(
            f"{OUT}/tables/data_check.tsv",
            caption="../report/data_check.rst",
            category="Data",
        ),
    log:
        f"{OUT}/logs/prepare_traits.log",
    conda:
        ENV
    params:
        traits=stable(config["traits"]),
    script:
        "../../scripts/prepare_traits.py"


rule make_demo_data:
    output:
        **DEMO_DATA,
    log:
        "demo/data/make_demo_data.log",
    conda:
        ENV
    script:
        "../../scripts/make_demo_data.py"
