# Model support and rates across the tree sample.


rule aggregate_fits:
    input:
        fits=fit_files("fits"),
        rates=fit_files("rates"),
        traits=f"{OUT}/prepared/traits.json",  # the headers as written
    output:
        fits=f"{OUT}/tables/fits.tsv",  # on disk; its summary is in the report
        rates=f"{OUT}/tables/rates.tsv",  # on disk; its summary is in the report
        support=report(
            f"{OUT}/tables/model_support.tsv",
            caption="../report/model_support.rst",
            category="Tables",
        ),
        rate_summary=report(
            f"{OUT}/tables/rate_summary.tsv",
            caption="../report/rate_summary.rst",
            category="Tables",
        ),
        averaged=f"{OUT}/tables/averaged_rates.tsv",  # on disk; its summary is in the report
        treatments=report(
            f"{OUT}/tables/treatment_support.tsv",
            caption="../report/treatment_support.rst",
            category="Tables",
        ),
        branch_tests=f"{OUT}/tables/branch_tests.tsv",  # on disk; its summary is in the report
        branch_test_summary=report(
            f"{OUT}/tables/branch_test_summary.tsv",
            caption="../report/branch_test_summary.rst",
            category="Tables",
        ),
        tree_sets=report(
            f"{OUT}/tables/tree_set_support.tsv",
            caption="../report/tree_set_support.rst",
            category="Tables",
        ),
    log:
        f"{OUT}/logs/aggregate_fits.log",
    conda:
        ENV
    params:
        criterion=config["criterion"],
        tree_sets=list(TREE_SETS),
        analyses=ANALYSES,
        model_order=[m for models in ANALYSES.values() for m in models],
    script:
        "../../scripts/aggregate_fits.py"
