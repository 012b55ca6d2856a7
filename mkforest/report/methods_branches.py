"""Methods and results text for branch-length treatments and competing tree sets."""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from ..engine.summarise import as_text
from ..engine.treatments import REGISTRY, null_words
from ..jobs.analyses import model_treatment
from .citations import cite


def treatment_words(name: str) -> str:
    """A treatment's description in the methods text, its source cited after it."""
    kind = REGISTRY[name]
    return kind.words + (f" {cite(kind.source)}" if kind.source else "")


def first_set(frame: pd.DataFrame | None) -> pd.DataFrame | None:
    """The rows of the first tree set (tables keep set order); tables without sets as they are."""
    if frame is None or "tree_set" not in frame or frame.empty:
        return frame
    sets = as_text(frame["tree_set"])
    return frame[sets == sets.iloc[0]]


def branches_paragraph(config: dict) -> str:
    """Which treatments the models use, how the parameter was fitted and compared; '' when
    every model uses the given lengths."""
    used = {}
    for name in config["models"]:
        used.setdefault(model_treatment(config, name), []).append(name)
    if all(t.name == "as_given" for t in used):
        return ""
    parts = []
    for treatment, names in used.items():
        fixed = treatment.label.partition("=")[2]
        what = treatment_words(treatment.name) + (f", fixed at {fixed}" if fixed else "")
        parts.append(f"{', '.join(names)}: {what}")
    return (
        "Branch lengths were treated per model (" + "; ".join(parts) + "). An estimated "
        "branch-length parameter was fitted jointly with the rates and counted as one more "
        "parameter; the treatments were compared like any other candidate models by their "
        "Akaike weights (tables/treatment_support.tsv), and each model with an estimated "
        "parameter was tested against the same model on the given lengths, which it nests "
        f"({null_words('symbol')}), by a likelihood-ratio test with one degree of "
        "freedom; lambda's null value lies on the bound of its range, so its statistic was "
        f"referred to an equal mixture of chi-square with 0 and 1 degrees of freedom "
        f"{cite('self1987')} (tables/branch_test_summary.tsv)."
    )


def tree_sets_paragraph(sets: dict) -> str:
    """What the comparison of tree sets is, and what it cannot claim; '' for one set."""
    if len(sets) < 2:
        return ""
    listing = "; ".join(f"'{n}' from {Path(s['file']).name}" for n, s in sets.items())
    return (
        f"Every analysis and model was fitted on every tree of {len(sets)} tree sets with "
        f"the same taxa ({listing}). The sets were compared descriptively: the distribution "
        "of ln L of each model across the trees of each set, and the fraction of pairs of "
        "trees, one from each set, in which one set gives the higher ln L "
        f"{cite('mcgraw1992')} (tables/tree_set_support.tsv). Trees are not parameters of "
        "the model and the sets are not nested, so no likelihood-ratio test or weight "
        "applies to them: the comparison says on which sample of trees the trait's "
        "likelihood is higher, not which trees are closer to the truth; lengths in "
        "different units, or trees inferred from different data, can change ln L for "
        "reasons unrelated to how the trait evolved. Ancestral states, stochastic maps and "
        "trait-pair tests were computed on every set, each on its own trees (tables carry "
        f"tree_set); this text describes the first set, '{next(iter(sets))}'."
    )


def results_lines(analysis: str, tables: dict) -> list:
    """Sentences on treatment support and tree sets for one analysis."""
    out = []
    ts = tables.get("treatment_support")
    if ts is not None and not ts.empty:
        g = first_set(ts)
        g = g[g["analysis"] == analysis]
        if len(g) > 1:
            best = g.sort_values("mean_weight", ascending=False).iloc[0]
            where = f" of tree set '{best['tree_set']}'" if ts["tree_set"].nunique() > 1 else ""
            out.append(
                f"Across {int(best['n_trees'])} trees{where}, branch-length treatment "
                f"'{best['branches']}' carried the largest mean summed Akaike weight "
                f"({best['mean_weight']:.2f}) and was the treatment of the best model on "
                f"{best['fraction_best']:.0%} of trees (tables/treatment_support.tsv)."
            )
    tests = tables.get("branch_test_summary")
    if tests is not None and not tests.empty and "n_below_null" in tests:
        for row in tests[(tests["analysis"] == analysis) & (tests["n_below_null"] > 0)].to_dict(
            "records"
        ):
            out.append(
                f"On {int(row['n_below_null'])} of {int(row['n_trees'])} trees the fit of "
                f"{row['alternative']} ended below that of {row['null']} on the given "
                "lengths, which it contains: its optimiser missed the maximum there, and "
                "those trees' test statistics were set to 0 (tables/branch_tests.tsv)."
            )
    sets = tables.get("tree_set_support")
    if sets is not None and not sets.empty:
        g = sets[(sets["analysis"] == analysis) & (sets["model"] == "best_model")]
        for s in g["statement"].dropna():
            if s and s != "one tree set: nothing to compare":
                out.append(s[0].upper() + s[1:] + " (tables/tree_set_support.tsv).")
    return out
