"""Methods and results text for branch-length treatments and competing tree sets."""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from ..engine.summarise import as_text
from ..engine.treatments import REGISTRY, null_words, parse_label
from ..jobs.analyses import model_treatment
from .citations import cite


def treatment_words(name: str) -> str:
    """A treatment's description in the methods text, its source cited after it."""
    kind = REGISTRY[name]
    return kind.words + (f" {cite(kind.source)}" if kind.source else "")


# A treatment in a few words, for the one-paragraph methods and the unit of rates.
BRIEF = {
    "as_given": "branch lengths as given",
    "unit": "every branch of length one",
    "kappa": "branch lengths raised to a power kappa",
    "lambda": "internal branches scaled by lambda",
    "delta": "node depths transformed by delta",
    "early_burst": "a rate changing exponentially with time from the root",
}


def treatment_label(config: dict, model: str) -> str:
    """A model's treatment as fits.tsv writes it ('kappa', 'kappa=0'), read by the
    registry's one reader of ``models.<model>.branches``."""
    return model_treatment(config, model).label


def treatment_brief(label: str) -> str:
    """'branch lengths raised to a power kappa, estimated per tree' (or 'fixed at 0')."""
    t = parse_label(label)
    words = BRIEF.get(t.name, t.name)
    if not t.kind.estimable:
        return words
    return words + (f" fixed at {t.fixed:g}" if t.fixed is not None else ", estimated on each tree")


def rate_unit_words(label: str) -> str:
    """The unit of rates under a treatment, in words."""
    name = parse_label(label).name
    if name == "as_given":
        return "changes per unit branch length"
    if name == "unit":
        return "changes per branch, every branch of length one"
    return f"changes per unit of branch length transformed by {name}"


def first_set(frame: pd.DataFrame | None) -> pd.DataFrame | None:
    """The rows of the first tree set (tables keep set order) and the rows that hold for
    every set (``tree_set`` empty, e.g. data_check.tsv's rows about the trait table);
    tables without sets as they are."""
    if frame is None or "tree_set" not in frame or frame.empty:
        return frame
    sets = as_text(frame["tree_set"])
    named = sets[sets != ""]
    return frame[(sets == "") | (sets == (named.iloc[0] if len(named) else ""))]


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


def tree_sets_brief(sets: dict, used: pd.DataFrame | None) -> str:
    """One sentence for the one-paragraph methods: the other sets fitted and compared;
    '' for one set."""
    if len(sets) < 2:
        return ""
    counts = (
        used.groupby(as_text(used["tree_set"])).size().to_dict()
        if used is not None and "tree_set" in used
        else {}
    )
    names = list(sets)
    others = [
        f"tree set '{n}'" + (f" ({counts[n]} trees)" if n in counts else "") for n in names[1:]
    ]
    return (
        f" The same models were fitted on every tree of {' and '.join(others)}, and the "
        f"sets were compared with '{names[0]}' by the distribution of ln L across their "
        f"trees {cite('mcgraw1992')}; each set's model support is reported."
    )


def other_sets_lines(analysis: str, support: pd.DataFrame, crit_name: str) -> list:
    """Per tree set after the first, the model with the largest mean Akaike weight for one
    analysis (model_support.tsv of that set): every set's main result is in the text."""
    if support is None or "tree_set" not in support:
        return []
    sets = list(dict.fromkeys(as_text(support["tree_set"])))
    out = []
    for ts in sets[1:]:
        g = support[(as_text(support["tree_set"]) == ts) & (support["analysis"] == analysis)]
        if "same_as" in g:
            g = g[as_text(g["same_as"]) == ""]
        g = g[g["n_trees"].astype(float) > 0].sort_values("mean_weight", ascending=False)
        if g.empty:
            continue
        best = g.iloc[0]
        n = int(best["n_trees"])
        k = int(round(float(best["fraction_best"]) * n))
        out.append(
            f"On tree set '{ts}' ({n} trees), {best['model']} received the most support "
            f"(mean Akaike weight {float(best['mean_weight']):.2f}; lowest {crit_name} on "
            f"{k} of {n} trees; tables/model_support.tsv)."
        )
    return out


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
