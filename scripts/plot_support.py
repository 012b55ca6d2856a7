"""Plots of model support and rates across trees."""

import sys
from pathlib import Path

sys.path.insert(0, str(Path(snakemake.scriptdir).parent))  # noqa: F821

import json

import pandas as pd

from mkforest.data.traits import traits_from_json, written_names
from mkforest.jobs.scripting import run_job
from mkforest.report import plots, style
from mkforest.report.methods_branches import first_set


def main(smk):
    text = {
        "model": str,
        "analysis": str,
        "from_state": str,
        "to_state": str,
        "same_as": str,
        "at_bound": str,
    }
    fits = pd.read_csv(
        smk.input.fits, sep="\t", dtype=text, keep_default_na=False, na_values=["", "nan", "NaN"]
    )
    rates = pd.read_csv(
        smk.input.rates, sep="\t", dtype=text, keep_default_na=False, na_values=["", "nan", "NaN"]
    )
    support = pd.read_csv(
        smk.input.support, sep="\t", dtype=text, keep_default_na=False, na_values=["", "nan", "NaN"]
    )
    traits = traits_from_json(json.loads(Path(smk.input.traits).read_text()))
    states = {name: list(t.states) for name, t in traits.items()}
    for pair, (first, second) in smk.params.pairs.items():  # joint states, first slowest
        states[pair] = [f"{a}+{b}" for a in states.get(first, []) for b in states.get(second, [])]
    out = smk.output
    names = written_names(smk.input.traits)

    def save(fig, paths):
        style.show_written_names(fig, names)
        plots.save(fig, paths)

    # the heatmap shows every tree set's support; the other figures the first set's, named
    # in their titles (plot_branches compares the sets)
    save(plots.support_heatmap(support), [out.support_heatmap_png, out.support_heatmap_svg])
    sets = list(dict.fromkeys(fits["tree_set"])) if "tree_set" in fits else []
    named = sets[0] if len(sets) > 1 else ""
    fits, rates, support = first_set(fits), first_set(rates), first_set(support)
    save(
        plots.support_weights(fits, smk.params.criterion, tree_set=named),
        [out.support_weights_png, out.support_weights_svg],
    )
    folder = Path(out.rates)
    folder.mkdir(parents=True, exist_ok=True)
    pages = plots.rate_pages(rates, support, smk.params.pairs, states, tree_set=named)
    for name, fig in pages.items():
        save(fig, [folder / f"{name}.png", folder / f"{name}.svg"])


run_job(snakemake, main)  # noqa: F821
