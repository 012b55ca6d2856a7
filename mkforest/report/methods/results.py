"""The results of each analysis: model support and rates across trees, in words."""

from __future__ import annotations

import pandas as pd

from ...engine.summarise import as_text
from ..methods_branches import (
    rate_unit_words,
)
from .numbers import count_of, how_often, number, plural

# --------------------------------------------------------------------------- results


def analysis_results(analysis, support, rate_summary, crit_name, n_used=None) -> str:
    rows = support[support["analysis"] == analysis]
    same = as_text(rows["same_as"]) if "same_as" in rows else pd.Series("", rows.index)
    ranked = rows[same == ""].sort_values("mean_weight", ascending=False, na_position="last")
    n = int(ranked["n_trees"].max()) if len(ranked) else 0
    if n == 0:
        return (
            f"{analysis} was not fitted (see tables/data_check.tsv: a trait needs at least "
            "two observed states)."
        )
    best = ranked.iloc[0]
    k_best = count_of(best["fraction_best"], int(best["n_trees"]))
    across = (
        f"Across the {n} trees"
        if n_used is None or n == n_used
        else f"Across the {n} of {n_used} trees on which {analysis} could be fitted"
    )
    text = (
        f"{across}, {best['model']} received the most support (mean Akaike "
        f"weight {number(best['mean_weight'])}; lowest {crit_name} on {k_best} of "
        f"{int(best['n_trees'])} trees): it was the best model "
        f"{how_often(k_best, int(best['n_trees']))}."
    )
    if best["mean_weight"] < 0.5:
        text += (
            " No model carries most of the weight on average: the data do not clearly "
            "favour one model."
        )
    others = []
    for row in ranked.iloc[1:].to_dict("records"):
        m = int(row["n_trees"])
        others.append(
            f"{row['model']} (mean weight {number(row['mean_weight'])}; lowest "
            f"{crit_name} on {count_of(row['fraction_best'], m)} of {m} trees; median "
            f"Δ{crit_name} {number(row['median_criterion_difference'])}, 95% interval across trees "
            f"{number(row['criterion_difference_low95'])} to {number(row['criterion_difference_high95'])})"
        )
    if others:
        text += (
            (" The other model: " if len(others) == 1 else " The other models: ")
            + "; ".join(others)
            + "."
        )
    rates = rate_summary[
        (rate_summary["analysis"] == analysis) & (rate_summary["model"] == best["model"])
    ]
    if len(rates):
        parts = [rate_words(r) for r in rates.to_dict("records")]
        unit = rate_unit_words(best.get("branches", "as_given"))
        text += (
            f" Under {best['model']}, the median rates across trees (central 95% interval; "
            f"{unit}) were: {'; '.join(parts)}."
        )
    return text


def rate_words(r: dict) -> str:
    """One transition of rate_summary.tsv in words. Trees where the data do not bound
    the rate from above are left out of the median and interval and counted beside
    them, with the smallest bound reached where it ran to the bound ("≥ X"): there
    the data give only a lower limit, never a value (mkforest.engine.summarise)."""
    head = f"{r['from_state']}→{r['to_state']}"
    n_unb = int(r.get("n_unbounded", 0) or 0)
    n_up = int(r.get("n_at_upper", 0) or 0)
    n_est = int(r.get("n_estimated", r.get("n_trees", 0)) or 0)
    if n_unb == 0:
        return (
            f"{head} {number(r['median_rate'])} ({number(r['rate_low95'])} to "
            f"{number(r['rate_high95'])})"
        )
    at_bound = f", at the upper bound (≥ {number(r['at_upper_min'])}) on {n_up}" if n_up else ""
    if n_est == 0:
        return (
            f"{head} not bounded above by the data on any tree{at_bound}; not estimable "
            "from these data"
        )
    return (
        f"{head} {number(r['median_rate'])} ({number(r['rate_low95'])} to "
        f"{number(r['rate_high95'])}) over the {plural(n_est, 'tree')} where the data bound "
        f"it; not bounded above on {n_unb}{at_bound}"
    )


def cautions(rows: pd.DataFrame, key: str) -> list:
    out = []
    for row in rows.to_dict("records"):
        c = row.get("caution")
        if isinstance(c, str) and c.strip():
            out.append(f"{row[key]}: {c.strip()}")
    return out
