"""Model support and rates summarised across the tree sample.

On every tree, the models of an analysis are ranked by the chosen criterion
(AICc by default) and given Akaike weights (Burnham & Anderson 2002). Across
trees we report, per analysis x model: mean and median weight, the fraction of
trees on which the model is best, and the median difference to the best model
with its central 95% interval. Rates are averaged over models with the same
weights on each tree (a forbidden transition counts as rate 0 in that model).

Rates the data do not bound from above. A rate the optimiser leaves at the
upper bound (rates.tsv ``at_bound`` = upper) is one the data cannot bound: the
likelihood keeps rising (or stays flat) as the rate grows, so the
maximum-likelihood estimate is "at least the bound", not the bound, and the
number written is an artefact of the optimiser's box. A rate estimated inside
the bounds whose 95% likelihood interval reaches the upper bound (``open``) has
a value but no upper limit: the data are as happy with a rate 10 or 100 times
larger. So, across trees, a rate's median and 95% interval are computed only
over the trees where the data bound it (``n_estimated``), and the others are
counted beside them (``n_unbounded``, of which ``n_at_upper`` at the bound
itself), with the smallest bound reached (``at_upper_min``: on those trees the
rate is at least this). The same
holds for the model-averaged rate of a tree: when the models whose rate is
unbounded make up at least BOUND_SHARE of the averaged value, it is flagged. Reporting an
estimate that runs to the optimiser's box as a one-sided limit ("at least the
bound") rather than as a value is common practice (a fact of the trade; no
single source). A rate at the lower bound is different: it is an estimate
of (effectively) zero, a value the data do support, so it stays in the medians
and is counted (``n_at_lower``).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .compare import IMPOSSIBLE

FEW_TREES = 20  # below this, 95% intervals across trees are rough
BOUND_SHARE = (
    0.01  # an averaged rate is bound-limited when bound-limited models make this share of it
)


def mark_duplicates(fits: pd.DataFrame, model_order=None) -> pd.DataFrame:
    """Add ``same_as``: a model whose structure and root equal those of an earlier
    model of the same analysis (config order) is the same hypothesis; it is
    reported but left out of the weights, which it would otherwise split."""
    fits = fits.copy()
    fits["same_as"] = ""
    if "structure" not in fits:
        return fits
    for _, g in fits.groupby("analysis", sort=False):
        models = list(dict.fromkeys(g["model"]))
        if model_order:
            models.sort(
                key=lambda m: model_order.index(m) if m in model_order else len(model_order)
            )
        first = {}
        for m in models:
            sig = g.loc[g["model"] == m, "structure"].iloc[0]
            if sig in first:
                fits.loc[g.index[g["model"] == m], "same_as"] = first[sig]
            else:
                first[sig] = m
    return fits


def add_weights(fits: pd.DataFrame, criterion: str = "aicc") -> pd.DataFrame:
    """Add criterion_difference (to the best model on the same tree) and weight columns
    (models marked ``same_as`` another are left out)."""
    fits = fits.copy()
    fits["criterion_difference"] = np.nan
    fits["weight"] = np.nan
    use = as_text(fits["same_as"]) == "" if "same_as" in fits else pd.Series(True, fits.index)
    # per (tree set, analysis, tree), as compare.akaike_weights does for one group, for all
    # groups at once (a loop over 4,000 groups of .loc assignments took 4 s)
    sub = fits.loc[use]
    vals = sub[criterion].astype(float)
    finite = np.isfinite(vals)
    groups = [sub[k] for k in _keys(fits, "analysis", "tree")]
    best = vals.where(finite).groupby(groups, sort=False).transform("min")
    e = np.exp(-0.5 * (vals - best)).where(finite, 0.0)
    total = e.groupby(groups, sort=False).transform("sum")
    fitted = best.notna()  # groups with no finite value keep criterion_difference and weight empty
    fits.loc[sub.index[fitted], "criterion_difference"] = (vals - best)[fitted]
    fits.loc[sub.index[fitted], "weight"] = (e / total)[fitted]
    return fits


def as_text(column: pd.Series) -> pd.Series:
    """A table column as text, missing cells as "" (a column read back from a TSV whose
    cells are all empty is float NaN, and filling a float column with "" is deprecated)."""
    return column.astype(object).where(column.notna(), "").astype(str)


def _keys(frame, *names) -> list:
    """Group keys, with the tree set first when the table has one (several tree
    sets share tree positions, so every per-tree grouping includes the set)."""
    return (["tree_set"] if "tree_set" in frame else []) + list(names)


def finite_quantile(x, p):
    """The p-quantile of the finite values of x (NaN when there are none)."""
    x = np.asarray(x, dtype=float)
    x = x[np.isfinite(x)]
    return float(np.quantile(x, p)) if x.size else np.nan


def model_support(fits: pd.DataFrame) -> pd.DataFrame:
    """One row per analysis x model (``fits`` must carry criterion_difference and weight)."""
    rows = []
    for key, g in fits.groupby(_keys(fits, "analysis", "model"), sort=False):
        analysis, model = key[-2:]
        fitted = g[np.isfinite(g["criterion_difference"].astype(float))]
        n = len(fitted)
        ll = g["log_likelihood"].astype(float)
        impossible = ll == -np.inf  # the data cannot arise under the model
        tried = ~ll.isna()  # NaN: not fitted (trait does not vary)
        at_bound = ((as_text(g["at_lower"]) != "") | (as_text(g["at_upper"]) != "")).sum()
        rows.append(
            {
                **({"tree_set": key[0]} if len(key) == 3 else {}),
                "analysis": analysis,
                "model": model,
                "n_params": int(g["n_params"].iloc[0]),
                **branch_columns(g, fitted),
                "n_trees": n,
                "mean_weight": fitted["weight"].mean() if n else np.nan,
                "median_weight": fitted["weight"].median() if n else np.nan,
                "fraction_best": float((fitted["criterion_difference"] == 0).mean())
                if n
                else np.nan,
                "median_criterion_difference": fitted["criterion_difference"].median()
                if n
                else np.nan,
                "criterion_difference_low95": finite_quantile(
                    fitted["criterion_difference"], 0.025
                ),
                "criterion_difference_high95": finite_quantile(
                    fitted["criterion_difference"], 0.975
                ),
                "median_log_likelihood": fitted["log_likelihood"].median() if n else np.nan,
                "n_fits": int(len(g)),
                "n_impossible": int(impossible.sum()),
                "n_not_converged": int((~g["converged"].astype(bool) & tried & ~impossible).sum()),
                "n_rates_at_bound": int(at_bound),
                "n_rates_at_upper": int((as_text(g["at_upper"]) != "").sum()),
                "n_rates_open_upper": int(
                    ((as_text(g["open_upper"]) != "") & (as_text(g["at_upper"]) == "")).sum()
                )
                if "open_upper" in g
                else 0,
                "n_branch_at_bound": int((as_text(g["branch_at_bound"]) != "").sum())
                if "branch_at_bound" in g
                else 0,
                "same_as": as_text(g["same_as"]).iloc[0] if "same_as" in g else "",
            }
        )
    out = pd.DataFrame(rows)
    out["caution"] = [cautions(r) for r in out.to_dict("records")]
    return out


def branch_columns(g: pd.DataFrame, fitted: pd.DataFrame) -> dict:
    """The treatment of one model and, when it has a parameter, its median and central 95%
    interval across the fitted trees."""
    if "branches" not in g:
        return {}
    est = fitted["branch_parameter"].astype(float) if "branch_parameter" in fitted else []
    return {
        "branches": g["branches"].iloc[0],
        "branch_parameter_median": float(np.median(est[np.isfinite(est)]))
        if np.isfinite(est).any()
        else np.nan,
        "branch_parameter_low95": finite_quantile(est, 0.025),
        "branch_parameter_high95": finite_quantile(est, 0.975),
    }


def cautions(row: dict) -> str:
    """Plain-words warnings for one analysis x model summary row."""
    words = []
    if row.get("same_as"):
        return (
            f"same hypothesis as '{row['same_as']}' for this analysis (identical rate "
            "structure); left out of the weights"
        )
    total = row.get("n_fits", row["n_trees"])  # every tree tried, fitted or not
    if row.get("n_impossible"):
        words.append(
            f"{row['n_impossible']} of {total} fits are impossible (ln L = -inf: the "
            "data cannot arise under this model on those trees, e.g. tips joined by "
            "zero-length branches in different states; see tables/data_check.tsv and "
            "trees.min_branch_length); those trees are left out of the weights"
        )
    if row["n_trees"] == 0:
        return "; ".join(words) if words else "not fitted"
    if row["n_not_converged"]:
        words.append(
            f"{row['n_not_converged']} of {total} fits did not converge "
            "(optimiser starts disagree); treat their likelihoods with care"
        )
    if row.get("n_rates_at_upper"):
        words.append(
            f"{row['n_rates_at_upper']} of {total} fits have a rate at the upper "
            "bound: that rate cannot be estimated from these data"
        )
    if row.get("n_rates_open_upper"):
        words.append(
            f"{row['n_rates_open_upper']} of {row['n_trees']} fits have a rate whose 95% "
            "interval reaches the upper bound: the data do not bound it from above"
        )
    lower_only = row["n_rates_at_bound"] - row.get("n_rates_at_upper", 0)
    if lower_only > 0:
        words.append(
            f"{lower_only} of {total} fits put a rate at the lower bound "
            "(effectively zero: no support for that change)"
        )
    if row.get("n_branch_at_bound"):
        words.append(
            f"{row['n_branch_at_bound']} of {row['n_trees']} fits put the branch-length "
            f"parameter ({row.get('branches', '')}) at a bound of its range"
        )
    if row["n_trees"] < FEW_TREES:
        words.append(
            f"only {row['n_trees']} tree{'' if row['n_trees'] == 1 else 's'}: intervals across trees are rough"
        )
    return "; ".join(words)


def class_count(states) -> int:
    """Hidden rate classes R of a model from its state labels: R distinct '@c' suffixes
    on every label ('rock@1', 'rock@2') when R > 1, else 1."""
    suffixes = set()
    for label in states:
        _, sep, cls = str(label).rpartition("@")
        if not (sep and cls.isdigit()):
            return 1
        suffixes.add(cls)
    return len(suffixes) if len(suffixes) > 1 else 1


def averaged_rates(fits: pd.DataFrame, rates: pd.DataFrame) -> pd.DataFrame:
    """Model-averaged rate per (tree set x) analysis x tree x transition.

    Models are averaged with others on the same states: the plain models of an
    analysis together, and the models with R hidden rate classes (states
    ``state@class``) together, each group's Akaike weights renormalised to sum
    to one within the group (a combined-state rate has no counterpart in a plain
    model, and classes are numbered slowest first in every model).

    ``weight_unbounded`` is the (group) Akaike weight of the models whose rate for
    this transition the data do not bound from above on this tree (at the upper
    bound or with a 95% interval reaching it); ``unbounded`` is True when their
    part of the averaged rate is at least BOUND_SHARE of it (the averaged value
    then rests on rates the data cannot bound, see the module docstring)."""
    keys = _keys(fits, "analysis", "model", "tree")
    w = fits[keys + ["weight"]].dropna()
    r = rates.merge(w, on=keys, how="inner")
    groups = {
        key: class_count(set(g["from_state"]) | set(g["to_state"]))
        for key, g in rates.groupby(["analysis", "model"], sort=False)
    }
    r["classes"] = [groups[(a, m)] for a, m in zip(r["analysis"], r["model"])]
    wg = w.copy()
    wg["classes"] = [groups.get((a, m), 1) for a, m in zip(wg["analysis"], wg["model"])]
    per = _keys(fits, "analysis", "tree", "classes")
    total = wg.groupby(per)["weight"].sum().rename("group_weight")
    r = r.merge(total.reset_index(), on=per, how="left")
    r["group_w"] = np.where(r["group_weight"] > 0, r["weight"] / r["group_weight"], 0.0)
    # a model with no weight on a tree (e.g. impossible there: rate NaN) adds nothing
    r["weighted"] = np.where(r["group_w"] > 0, r["rate"] * r["group_w"], 0.0)
    upper = _upper_flags(r)
    r["weighted_upper"] = r["weighted"].where(upper, 0.0)
    r["weight_upper"] = r["group_w"].where(upper, 0.0)
    out = (
        r.groupby(_keys(fits, "analysis", "tree", "from_state", "to_state"), sort=False)[
            ["weighted", "weighted_upper", "weight_upper"]
        ]
        .sum()
        .reset_index()
        .rename(columns={"weighted": "rate", "weight_upper": "weight_unbounded"})
    )
    out["unbounded"] = (out["weighted_upper"] > 0) & (
        out["weighted_upper"] >= BOUND_SHARE * out["rate"]
    )
    out.insert(out.columns.get_loc("analysis") + 1, "model", "averaged")
    return out.drop(columns="weighted_upper")


def _upper_flags(rates: pd.DataFrame) -> pd.Series:
    """True where the data do not bound a rate row from above (rates.tsv's ``at_bound``
    column is upper or open)."""
    if "at_bound" in rates:
        return as_text(rates["at_bound"]).str.strip().isin(["upper", "open"])
    if "unbounded" in rates:
        return as_text(rates["unbounded"]).str.lower().eq("true")
    return pd.Series(False, index=rates.index)


def _lower_flags(rates: pd.DataFrame) -> pd.Series:
    if "at_bound" in rates:
        return as_text(rates["at_bound"]).str.strip().eq("lower")
    return pd.Series(False, index=rates.index)


def impossible_flags(rates: pd.DataFrame) -> pd.Series:
    """True where a rates.tsv row comes from a fit with ln L = -inf (``at_bound`` =
    impossible, rate NaN): the data cannot arise under the model on that tree, so the
    row holds no estimate and every summary leaves it out and counts it."""
    flags = rates["rate"].isna() if "rate" in rates else pd.Series(False, index=rates.index)
    if "at_bound" in rates:
        flags |= as_text(rates["at_bound"]).str.strip().eq(IMPOSSIBLE)
    return flags


def rate_summary(rates: pd.DataFrame, averaged: pd.DataFrame | None = None) -> pd.DataFrame:
    """Median and 95% interval across trees per analysis x model x transition,
    for every model and for the model average, over the trees where the data
    bound the rate (``n_estimated``). Trees where they do not (``n_unbounded``:
    the rate ran to the upper bound, ``n_at_upper`` of them, or its 95% interval
    reaches it) are left out of the median and interval and counted, with
    ``at_upper_min`` the smallest value reached at the bound (the rate is at
    least that there). ``status``: estimated, partly_unbounded, unbounded, or
    impossible (no tree where the fit is possible).
    For the model average, the trees flagged ``unbounded`` in averaged_rates
    count as unbounded.

    Fits with ln L = -inf (``impossible_flags``) have no rates: they are left out
    of everything and counted in ``n_impossible``; ``n_trees`` (= n_estimated +
    n_unbounded) counts the trees where the fit is possible, as in model_support.
    For the model average, a tree is impossible when every model that allows the
    change is impossible there. ``averaged`` None: the models alone.

    This is the one statistic of a rate across trees: every figure that draws a rate's
    median and interval takes them from here (report.style.rate_intervals)."""
    per_model = rates[
        _keys(rates, "analysis", "model", "tree", "from_state", "to_state", "rate")
    ].copy()
    per_model["upper"] = _upper_flags(rates).to_numpy()
    per_model["lower"] = _lower_flags(rates).to_numpy()
    per_model["at_upper"] = (
        as_text(rates["at_bound"]).str.strip().eq("upper").to_numpy()
        if "at_bound" in rates
        else False
    )
    per_model["impossible"] = impossible_flags(rates).to_numpy()
    models_alone = averaged is None  # no model-average rows, not even impossible ones
    if averaged is None:
        averaged = per_model.iloc[:0][
            _keys(rates, "analysis", "model", "tree", "from_state", "to_state", "rate")
        ]
    avg = averaged[
        _keys(averaged, "analysis", "model", "tree", "from_state", "to_state", "rate")
    ].copy()
    avg["upper"] = _upper_flags(averaged).to_numpy()
    avg["lower"] = False
    avg["at_upper"] = False
    avg["impossible"] = False
    parts = [per_model] if models_alone else [per_model, avg, _impossible_averages(per_model, avg)]
    both = pd.concat(parts, ignore_index=True)
    rows = []
    for key, g in both.groupby(
        _keys(both, "analysis", "model", "from_state", "to_state"), sort=False
    ):
        a, m, f, t = key[-4:]
        impossible = g["impossible"].to_numpy(bool)
        g = g[~impossible]
        x = g["rate"].to_numpy(float)
        upper = g["upper"].to_numpy(bool)
        at_upper = g["at_upper"].to_numpy(bool)
        est = x[~upper]
        status = (
            "impossible"
            if not len(g)
            else "estimated"
            if not upper.any()
            else ("unbounded" if est.size == 0 else "partly_unbounded")
        )
        rows.append(
            {
                **({"tree_set": key[0]} if len(key) == 5 else {}),
                "analysis": a,
                "model": m,
                "from_state": f,
                "to_state": t,
                "n_trees": len(x),
                "n_estimated": int(est.size),
                "n_unbounded": int(upper.sum()),
                "n_at_upper": int(at_upper.sum()),
                "n_at_lower": int(g["lower"].sum()),
                "n_impossible": int(impossible.sum()),
                "median_rate": float(np.median(est)) if est.size else np.nan,
                "rate_low95": finite_quantile(est, 0.025),
                "rate_high95": finite_quantile(est, 0.975),
                "at_upper_min": float(x[at_upper].min()) if at_upper.any() else np.nan,
                "status": status,
            }
        )
    return pd.DataFrame(rows)


def _impossible_averages(per_model: pd.DataFrame, avg: pd.DataFrame) -> pd.DataFrame:
    """'averaged' rows (rate NaN, impossible) for the trees where every model's row of a
    change is impossible and the average has no row: those trees are counted, not lost."""
    tree_keys = _keys(per_model, "analysis", "tree", "from_state", "to_state")
    every = per_model.groupby(tree_keys, sort=False)["impossible"].all()
    every = every[every].reset_index()[tree_keys]
    if len(avg):
        have = avg[tree_keys].drop_duplicates().assign(_have=True)
        every = every.merge(have, on=tree_keys, how="left")
        every = every[every["_have"].isna()].drop(columns="_have")
    return every.assign(
        model="averaged", rate=np.nan, upper=False, lower=False, at_upper=False, impossible=True
    )
