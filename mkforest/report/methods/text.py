"""The whole methods and results text, its tables, and the run's last words."""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from ...data.config import tree_sets
from ...engine.summarise import as_text
from ..citations import cited_in
from ..methods_bayes import bayes_paragraph, bayes_results, bayes_warnings
from ..methods_branches import (
    branches_paragraph,
    first_set,
    other_sets_lines,
    results_lines,
    tree_sets_paragraph,
)
from ..methods_scan import scan_methods_lines, scan_results
from .ancestral import ancestral_cautions, ancestral_paragraph, ancestral_results
from .brief import BRIEF_HEADING, brief_paragraph
from .data import data_paragraph, trees_paragraph
from .models import CRITERION_NAMES, comparison_paragraph, fitting_paragraph, models_paragraph
from .pairs import pair_results, pairs_paragraph
from .results import analysis_results, cautions


def _software_paragraph(config, software) -> str:
    libs = [
        f"{name} {software[key]}"
        for key, name in (
            ("numpy", "NumPy"),
            ("scipy", "SciPy"),
            ("dendropy", "DendroPy"),
            ("pandas", "pandas"),
            ("matplotlib", "Matplotlib"),
            ("numba", "Numba"),
        )
        if software.get(key)
    ]
    return (
        f"The analysis ran with mkforest {software.get('mkforest', '')} as a Snakemake "
        f"{software.get('snakemake', '')} workflow under Python {software.get('python', '')} "
        f"({', '.join(libs)}), with seed {config['seed']}. The file manifest.json beside this "
        "text lists the complete settings and the SHA-256 checksum of every input and result "
        "file."
    )


# --------------------------------------------------------------------------- the whole text


def methods_text(config: dict, tables: dict, models: dict, software: dict) -> str:
    sets = tree_sets(config)
    every_support = tables["model_support"]  # every set's, for the other sets' results
    every_used = tables.get("trees_used")
    # the sections below describe the first tree set; the comparison of sets has its own
    tables = {
        name: (t if name in ("tree_set_support", "treatment_support") else first_set(t))
        for name, t in tables.items()
    }
    tables["all_trees_used"] = every_used
    support = tables["model_support"]
    crit_name = CRITERION_NAMES[config["criterion"]]
    pair_summary = tables.get("pair_summary")
    has_pairs = bool(config.get("pairs")) and ("pair_tests" in tables or pair_summary is not None)
    has_ancestral = "ancestral_states" in tables or "transitions" in tables

    out = [
        "# Methods and results",
        "",
        f"_Written by mkforest {software.get('mkforest', '')} from this run's settings and "
        "tables. Every number is rounded from the table named beside it; edit the wording, "
        "keep the numbers, and check the cautions before citing a result._",
        "",
        BRIEF_HEADING,
        "",
        brief_paragraph(config, tables, models, software),
        "",
        "## Methods in full",
        "",
        "**Data and trees.** "
        + data_paragraph(config, tables)
        + " "
        + trees_paragraph(config, tables)
        + (" " + tree_sets_paragraph(sets) if len(sets) > 1 else ""),
        "",
        "**Models.** " + models_paragraph(config, models, support),
        "",
        "**Fitting.** " + fitting_paragraph(config, software),
        "",
        "**Model comparison.** " + comparison_paragraph(config),
        "",
    ]
    if branches_paragraph(config):
        out += ["**Branch lengths.** " + branches_paragraph(config), ""]
    if has_pairs:
        out += ["**Trait pairs.** " + pairs_paragraph(config, pair_summary), ""]
    if has_ancestral:
        para = ancestral_paragraph(config, tables)
        if para:
            out += ["**Ancestral states.** " + para, ""]
    bayes = bayes_paragraph(config, tables)  # report/methods_bayes.py
    if bayes:
        out += ["**Bayesian estimation.** " + bayes, ""]
    out += scan_methods_lines(config, tables)  # the all-pairs scan: report/methods_scan.py
    out += ["**Software.** " + _software_paragraph(config, software), ""]

    out += [
        "## Results",
        "",
        f"Model support is from tables/model_support.tsv, rates from "
        f"tables/rate_summary.tsv{', pair tests from tables/pair_summary.tsv' if has_pairs else ''}"
        f"{', ancestral states and changes from tables/ancestral_states.tsv and tables/transitions.tsv' if has_ancestral else ''}.",
        "",
    ]
    rate_summary = tables["rate_summary"]
    for analysis in models:
        out += [
            f"### {analysis}",
            "",
            analysis_results(analysis, support, rate_summary, crit_name, len(tables["trees_used"])),
        ]
        extra = other_sets_lines(analysis, every_support, crit_name) + results_lines(
            analysis, tables
        )
        if extra:
            out += ["", " ".join(extra)]
        if has_pairs and pair_summary is not None and analysis in config["pairs"]:
            pr = pair_results(analysis, pair_summary)
            if pr:
                out += ["", pr]
        if has_ancestral and analysis in config["traits"]["columns"]:
            ar = ancestral_results(analysis, tables)
            if ar:
                out += ["", ar]
        br = bayes_results(analysis, tables)
        if br:
            out += ["", br]
        notes = cautions(support[support["analysis"] == analysis], "model")
        if has_pairs and pair_summary is not None and analysis in config["pairs"]:
            rows = pair_summary[pair_summary["pair"] == analysis].copy()
            rows["test"] = rows["null"] + " against " + rows["alternative"]
            notes += cautions(rows, "test")
        if has_ancestral and analysis in config["traits"]["columns"]:
            notes += ancestral_cautions(analysis, tables)
        if notes:
            out += ["", "Cautions:", ""] + [f"- {n}" for n in notes]
        out.append("")
    if scan_methods_lines(config, tables):
        out += scan_results(tables.get("scan"))
    body = "\n".join(out)
    refs = cited_in(body)
    body += "\n## References\n\n" + "\n".join(f"- {r.full()}" for r in refs) + "\n"
    return body


def read_tables(paths: dict) -> dict:
    """{name: DataFrame} from {name: path}; state labels and captions stay text."""
    out = {}
    for name, path in paths.items():
        out[name] = pd.read_csv(
            path,
            sep="\t",
            keep_default_na=False,
            na_values=["", "nan", "NaN"],
            dtype={
                "state": str,
                "from_state": str,
                "to_state": str,
                "caution": str,
                "same_as": str,
                "clade": str,
                "model": str,
                "analysis": str,
            },
        )
        for col in ("caution", "same_as"):
            if col in out[name]:
                out[name][col] = as_text(out[name][col])
    return out


def table_name(path) -> str:
    return Path(path).name.removesuffix(".tsv")


def run_warnings(run_dir) -> list:
    """Plain sentences for the end of a run: fits that are impossible (ln L = -inf) and the
    number of models whose summary carries a caution. Empty when the tables are not there."""
    path = Path(run_dir) / "tables" / "model_support.tsv"
    if not path.is_file():
        return bayes_warnings(run_dir)
    support = read_tables({"model_support": path})["model_support"]
    out = []
    if "n_impossible" in support:
        for row in support[support["n_impossible"] > 0].to_dict("records"):
            out.append(
                f"{row['analysis']} / {row['model']}: {int(row['n_impossible'])} of "
                f"{int(row['n_fits'])} fits are impossible (ln L = -inf); see "
                f"{Path(run_dir) / 'tables' / 'data_check.tsv'} and trees.min_branch_length."
            )
    cautious = support[support["caution"].str.strip() != ""]
    if len(cautious):
        out.append(
            f"{len(cautious)} of {len(support)} model summaries carry a caution: read the "
            f"caution column of {path} and the Cautions in {Path(run_dir) / 'methods.md'} "
            "before citing a result."
        )
    return out + bayes_warnings(run_dir)
