"""Methods and results text of the all-pairs scan (tables/scan.tsv)."""

from __future__ import annotations

import pandas as pd

from ..engine.summarise import as_text
from .citations import cite
from .words import hypothesis_structure

SHOWN = 10  # pairs named in the results text; the rest are in the table


def _words(n: int, word: str) -> str:
    return f"{n} {word}{'' if n == 1 else 's'}"


def scan_paragraph(config: dict, summary: pd.DataFrame | None) -> str:
    """How the scan was done, in the words of a methods section."""
    scan = config["scan"]
    alts = scan["alternatives"]
    traits = (
        sorted(set(summary["trait_1"]) | set(summary["trait_2"])) if summary is not None else []
    )
    n_pairs = len(summary[["trait_1", "trait_2"]].drop_duplicates()) if summary is not None else 0
    text = (
        f"Every pair of {_words(len(traits), 'trait')} ({n_pairs} pairs"
        + (
            "; traits whose joint chain would exceed "
            f"{scan['joint_states']} states were not paired)"
            if scan["joint_states"] > 4 or scan["traits"] != "all"
            else "; binary traits only)"
        )
        + " was tested on each tree for correlated evolution: the hypothesis that the two "
        f"traits change independently {cite('pagel1994')} against "
        + "; and against ".join(
            f"{a} ({hypothesis_structure(a, 'the first trait', 'the second')})" for a in alts
        )
        + ". The independent hypothesis's maximum log-likelihood is the sum of the two "
        "traits' separate unconstrained fits, so each trait was fitted once per tree; each "
        "alternative was fitted with the independent optimum among its starts. Twice the "
        "difference in log-likelihood was referred to a chi-square distribution with as "
        "many degrees of freedom as the alternative has extra rates. On each tree, the "
        "p-values of all pairs were adjusted for false discovery "
        f"{cite('benjamini1995')} and a pair counted as a discovery on that tree when its "
        f"adjusted value was at most {scan['level']:g}. Across trees, each pair is "
        "summarised by the fraction of trees on which it is a discovery and by the median "
        "p-value, itself adjusted across pairs in the same way."
    )
    if scan["hidden_classes"] > 1:
        text += (
            f" Every hypothesis was fitted with {scan['hidden_classes']} hidden rate classes "
            f"{cite('beaulieu2013')}, the independent one on the joint states of each pair."
        )
    text += (
        " Rate variation that neither hypothesis allows (for instance a trait whose rates "
        "follow the state of a third trait) can make a pair appear dependent "
        f"{cite('maddison2015')}; a flagged pair deserves a full pair analysis with a "
        "parametric bootstrap before it is reported."
    )
    text += (
        " The trees of a sample are not independent replicates: the fraction of trees "
        "measures how robust a pair's result is to phylogenetic uncertainty, and the "
        "adjusted median p-value is a summary, not a test over trees."
    )
    return text


def scan_results(summary: pd.DataFrame | None) -> list:
    """Lines of the scan's results section (first tree set) with its cautions."""
    if summary is None or summary.empty:
        return []
    out = ["### All-pairs scan", ""]
    ok = summary[summary["n_trees"] > 0]
    level = float(summary["level"].iloc[0])
    found = ok[as_text(ok["discovered"]).str.lower().eq("true")]
    sentences = [
        f"Of {len(ok)} tests with a result, {len(found)} had a median p-value whose "
        f"false-discovery-adjusted value was at most {level:g} (tables/scan.tsv)."
    ]
    for r in ok.head(SHOWN).to_dict("records"):
        if float(r["fraction_discovered"]) <= 0:
            break
        sentences.append(
            f"{r['trait_1']} with {r['trait_2']} (independent against {r['alternative']}): a "
            f"discovery on {float(r['fraction_discovered']):.0%} of {int(r['n_trees'])} trees, "
            f"median statistic {float(r['median_statistic']):.3g} (95% of trees "
            f"{float(r['statistic_low95']):.3g}-{float(r['statistic_high95']):.3g}), median "
            f"p {float(r['median_p']):.2g}, adjusted {float(r['q_value']):.2g}."
        )
    out.append(" ".join(sentences))
    notes = [
        f"{r['trait_1']} with {r['trait_2']} ({r['alternative']}): {r['caution'].strip()}"
        for r in summary.assign(caution=as_text(summary["caution"])).to_dict("records")
        if r["caution"].strip()
    ]
    if notes:
        out += ["", "Cautions:", ""] + [f"- {n}" for n in notes]
    out.append("")
    return out


def scan_methods_lines(config: dict, tables: dict) -> list:
    """The methods-text paragraph of the scan, when it ran (the hook in methods.py)."""
    if not (config.get("scan") or {}).get("traits") or tables.get("scan") is None:
        return []
    return ["**All-pairs scan.** " + scan_paragraph(config, tables["scan"]), ""]
