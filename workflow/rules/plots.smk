# Figures of model support and rates across trees (PNG for reading, SVG for print).


rule plot_support:
    input:
        fits=f"{OUT}/tables/fits.tsv",
        rates=f"{OUT}/tables/rates.tsv",
        support=f"{OUT}/tables/model_support.tsv",
        traits=f"{OUT}/prepared/traits.json",
    output:
        **{
            f"{p}_{ext}": figure(
                f"{OUT}/plots/{p}.{ext}",
                caption=f"../report/{p}.rst",
                category="Plots",
            )
            for p in PLOTS
            for ext in ("png", "svg")
        },
        rates=report(
            directory(RATE_PAGES),
            patterns=["{name}.png"],
            caption="../report/rates_across_trees.rst",
            category="Plots",
        ),
    log:
        f"{OUT}/logs/plot_support.log",
    conda:
        ENV
    params:
        criterion=config["criterion"],
        pairs={name: spec["traits"] for name, spec in config.get("pairs", {}).items()},
    script:
        "../../scripts/plot_support.py"


rule plot_branches:
    input:
        fits=f"{OUT}/tables/fits.tsv",
        traits=f"{OUT}/prepared/traits.json",  # the headers as written
    output:
        png=report(
            f"{OUT}/plots/support_branches.png",
            caption="../report/support_branches.rst",
            category="Plots",
        ),
        svg=f"{OUT}/plots/support_branches.svg",  # for print; the report shows the PNG
    log:
        f"{OUT}/logs/plot_branches.log",
    conda:
        ENV
    params:
        criterion=config["criterion"],
    script:
        "../../scripts/plot_branches.py"
