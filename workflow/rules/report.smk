# Provenance of a run: a methods text written from its own tables, and a manifest
# of checksums, settings, trees used and software. Both are final outputs; the
# manifest comes last, as it hashes every other result of the run.


include: "report_inputs.smk"


rule methods:
    input:
        support=f"{OUT}/tables/model_support.tsv",
        used=f"{OUT}/tables/trees_used.tsv",
        check=f"{OUT}/tables/data_check.tsv",
        rates=f"{OUT}/tables/rate_summary.tsv",
        traits=f"{OUT}/prepared/traits.json",
        tables=final_tables,
    output:
        report(f"{OUT}/methods.md", caption="../report/methods.rst", category="Methods"),
    log:
        f"{OUT}/logs/methods.log",
    conda:
        ENV
    params:
        config=stable(config),
        analyses=list(ANALYSES),
    script:
        "../../scripts/write_methods.py"


rule manifest:
    input:
        outputs=run_results,
        used=f"{OUT}/tables/trees_used.tsv",
        inputs=[path for _, path in input_files(config)],
        configfiles=CONFIG_FILES,
    output:
        report(
            f"{OUT}/manifest.json",
            caption="../report/manifest.rst",
            category="Provenance",
        ),
    log:
        f"{OUT}/logs/manifest.log",
    conda:
        ENV
    params:
        config=stable(config),
        run_folder=lambda wildcards, output: os.path.dirname(output[0]),
        inputs=input_files(config),
        configfiles=CONFIG_FILES,
        invocation=INVOCATION,
    script:
        "../../scripts/write_manifest.py"


onsuccess:
    # The run's last words: anything that makes a result unusable is repeated here,
    # so it is not lost in the job logs. (Imported here, not at the top: the methods
    # module pulls in pandas, and every parse of this Snakefile would pay for it.)
    from mkforest.report.methods import run_warnings

    for line in run_warnings(OUT):
        print(f"mkforest: warning: {line}", file=sys.stderr)
    cancel_scheduler_timers()


onerror:
    cancel_scheduler_timers()
