"""Support for branch-length treatments and for competing tree sets, across trees.

Treatments: on every tree the Akaike weights of an analysis's models are summed
by treatment (the treatments are candidate models like any other); a model with
an estimated treatment is also tested against the same model on the given
lengths, which it nests (kappa = lambda = delta = 1, rate_change = 0), by a
likelihood-ratio test with one degree of freedom. For lambda the null value
lies on the bound of its range [0, 1], so the statistic is referred to an equal
mixture of chi-square with 0 and 1 degrees of freedom (Self & Liang 1987,
J. Am. Stat. Assoc. 82:605).

Tree sets: trees are not parameters of the model, so two sets are compared
descriptively: the distribution of ln L (and of the criterion) of each model
on each set, and the fraction of (tree of one set, tree of the other) pairs in
which the first gives the higher ln L (the common-language effect size,
McGraw & Wong 1992, Psychol. Bull. 111:361).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .summarise import FEW_TREES, as_text, finite_quantile
from .treatments import parse_label

ALPHA = 0.05
BEST = "best_model"  # tree_set_support rows of the best model on each tree
CLEAR = 0.95  # fraction of tree pairs for "consistently"
MOST = 0.75  # ... for "on most pairs of trees"
TIE = 1e-6  # ln L differences below this are ties


def _set_col(fits):
    if "tree_set" not in fits:
        fits = fits.assign(tree_set="")
    return fits


def _base_structure(structure: str) -> str:
    return str(structure).split(" | branches ")[0]


def treatment_support(fits: pd.DataFrame) -> pd.DataFrame:
    """One row per tree set x analysis x treatment label: the Akaike weight summed over
    the models with that treatment (mean and median across trees) and the fraction of
    trees on which the best model has it. ``fits`` must carry criterion_difference and weight."""
    fits = _set_col(fits)
    rows = []
    for (ts, analysis), g in fits.groupby(["tree_set", "analysis"], sort=False):
        g = g[np.isfinite(g["weight"].astype(float))]
        n = g["tree"].nunique()
        if n == 0:
            continue
        per_tree = g.pivot_table(
            index="tree", columns="branches", values="weight", aggfunc="sum", fill_value=0.0
        )
        best = g.loc[g.groupby("tree")["criterion_difference"].idxmin(), ["tree", "branches"]]
        for label in dict.fromkeys(g["branches"]):
            w = per_tree[label]
            rows.append(
                {
                    "tree_set": ts,
                    "analysis": analysis,
                    "branches": label,
                    "models": ",".join(dict.fromkeys(g.loc[g["branches"] == label, "model"])),
                    "n_trees": n,
                    "mean_weight": float(w.mean()),
                    "median_weight": float(w.median()),
                    "fraction_best": float((best["branches"] == label).mean()),
                }
            )
    return pd.DataFrame(
        rows,
        columns=[
            "tree_set",
            "analysis",
            "branches",
            "models",
            "n_trees",
            "mean_weight",
            "median_weight",
            "fraction_best",
        ],
    )


TEST_COLUMNS = [
    "tree_set",
    "analysis",
    "null",
    "alternative",
    "branches",
    "tree",
    "statistic",
    "df",
    "p_value",
    "branch_parameter",
    "note",
]
TEST_SUMMARY_COLUMNS = [
    "tree_set",
    "analysis",
    "null",
    "alternative",
    "branches",
    "n_trees",
    "median_statistic",
    "statistic_low95",
    "statistic_high95",
    "fraction_rejected",
    "alpha",
    "n_below_null",
]
# An estimated treatment contains the given lengths, so its ln L cannot truly be below
# theirs; a fit further below than the optimiser's agreement tolerance missed its maximum.
BELOW_NULL = 0.01


def lrt_p_value(statistic: float, treatment: str) -> float:
    """p of the one-parameter test of a treatment against the given lengths (chi-square,
    1 df; for lambda the 50:50 mixture of chi-square 0 and 1 df, see the module docstring)."""
    if not np.isfinite(statistic):
        return np.nan
    # imported here: the table and figure jobs that import this module need no SciPy
    from scipy.special import chdtrc

    p = float(chdtrc(1, statistic))
    if treatment == "lambda":
        return 1.0 if statistic <= 0 else 0.5 * p
    return p


def branch_tests(fits: pd.DataFrame, alpha: float = ALPHA) -> pd.DataFrame:
    """(per-tree rows, summary rows) of the likelihood-ratio tests of every model with an
    estimated treatment against the same rate structure and root on the given lengths."""
    fits = _set_col(fits)
    per_tree, summary = [], []
    for (ts, analysis), g in fits.groupby(["tree_set", "analysis"], sort=False):
        first = g.drop_duplicates("model")
        base = {m: _base_structure(s) for m, s in zip(first["model"], first["structure"])}
        label = dict(zip(first["model"], first["branches"]))
        for alt in first["model"]:
            if not parse_label(label[alt]).free:
                continue
            same = (
                dict(zip(first["model"], as_text(first["same_as"]))) if "same_as" in first else {}
            )
            nulls = [
                m
                for m in first["model"]
                if parse_label(label[m]).name == "as_given"
                and base[m] == base[alt]
                and not same.get(m)
            ]
            if not nulls:
                continue
            null = nulls[0]
            a = g[g["model"] == alt].set_index("tree")
            b = g[g["model"] == null].set_index("tree")
            common = a.index.intersection(b.index)
            rows = []
            for tree in common:
                la, lb = float(a.at[tree, "log_likelihood"]), float(b.at[tree, "log_likelihood"])
                stat = max(0.0, 2.0 * (la - lb)) if np.isfinite(la) and np.isfinite(lb) else np.nan
                note = ""
                if np.isfinite(la) and np.isfinite(lb) and la < lb - BELOW_NULL:
                    note = (
                        f"the fit with {label[alt]} is {lb - la:.3g} log-units below the fit "
                        "on the given lengths, which it contains: its optimiser missed the "
                        "maximum on this tree; statistic set to 0"
                    )
                rows.append(
                    {
                        "tree_set": ts,
                        "analysis": analysis,
                        "null": null,
                        "alternative": alt,
                        "branches": label[alt],
                        "tree": int(tree),
                        "statistic": stat,
                        "df": 1,
                        "p_value": lrt_p_value(stat, label[alt]),
                        "branch_parameter": a.at[tree, "branch_parameter"],
                        "note": note,
                    }
                )
            per_tree += rows
            stats = np.array([r["statistic"] for r in rows], dtype=float)
            ps = np.array([r["p_value"] for r in rows], dtype=float)
            ok = np.isfinite(ps)
            summary.append(
                {
                    "tree_set": ts,
                    "analysis": analysis,
                    "null": null,
                    "alternative": alt,
                    "branches": label[alt],
                    "n_trees": int(ok.sum()),
                    "median_statistic": float(np.median(stats[ok])) if ok.any() else np.nan,
                    "statistic_low95": finite_quantile(stats, 0.025),
                    "statistic_high95": finite_quantile(stats, 0.975),
                    "fraction_rejected": float((ps[ok] < alpha).mean()) if ok.any() else np.nan,
                    "alpha": alpha,
                    "n_below_null": sum(1 for r in rows if r["note"]),
                }
            )
    return (
        pd.DataFrame(per_tree, columns=TEST_COLUMNS),
        pd.DataFrame(summary, columns=TEST_SUMMARY_COLUMNS),
    )


def _best_rows(fits, criterion):
    """Per tree set x analysis x tree, the row of the model with the smallest criterion."""
    f = fits[np.isfinite(fits[criterion].astype(float))]
    if "same_as" in f:
        f = f[as_text(f["same_as"]) == ""]
    idx = f.groupby(["tree_set", "analysis", "tree"])[criterion].idxmin()
    return f.loc[idx].assign(model=BEST)


def fraction_higher(x, y, tol: float = TIE) -> float:
    """Fraction of pairs (x_i, y_j) with x_i > y_j + tol, pairs within tol counting one half
    (ln L values within the optimiser's precision are ties: e.g. the same unit-length
    tree on two sets)."""
    x = np.sort(np.asarray(x, dtype=float))
    y = np.sort(np.asarray(y, dtype=float))
    if not len(x) or not len(y):
        return np.nan
    below = np.searchsorted(y, x - tol, side="left")
    equal = np.searchsorted(y, x + tol, side="right") - below
    return float((below + 0.5 * equal).sum() / (len(x) * len(y)))


def tree_set_support(fits: pd.DataFrame, criterion: str = "aicc") -> pd.DataFrame:
    """One row per analysis x model (and the best model per tree) x tree set: the
    distribution of ln L and the criterion, compared with the set of the highest median
    ln L by the fraction of tree pairs in which that set fits better, in plain words."""
    fits = _set_col(fits)
    both = pd.concat([fits, _best_rows(fits, criterion)], ignore_index=True)
    rows = []
    for (analysis, model), g in both.groupby(["analysis", "model"], sort=False):
        sets = list(dict.fromkeys(g["tree_set"]))
        ll = {s: g.loc[(g["tree_set"] == s), "log_likelihood"].astype(float) for s in sets}
        ll = {s: v[np.isfinite(v)] for s, v in ll.items()}
        med = {s: float(v.median()) if len(v) else -np.inf for s, v in ll.items()}
        top = max(sets, key=lambda s: med[s])
        for s in sets:
            crit = g.loc[g["tree_set"] == s, criterion].astype(float)
            row = {
                "analysis": analysis,
                "model": model,
                "tree_set": s,
                "n_trees": len(ll[s]),
                "median_log_likelihood": med[s] if len(ll[s]) else np.nan,
                "log_likelihood_low95": finite_quantile(ll[s], 0.025),
                "log_likelihood_high95": finite_quantile(ll[s], 0.975),
                f"median_{criterion}": finite_quantile(crit, 0.5),
                f"{criterion}_low95": finite_quantile(crit, 0.025),
                f"{criterion}_high95": finite_quantile(crit, 0.975),
                "compared_with": "",
                "fraction_better": np.nan,
                "statement": "",
            }
            if len(sets) > 1 and s != top:
                frac = fraction_higher(ll[top], ll[s])
                statement = _statement(analysis, model, top, s, frac, med)
                few = min(len(ll[top]), len(ll[s]))
                if few < FEW_TREES:
                    statement += f"; only {few} trees in a set: a rough comparison"
                row.update(compared_with=top, fraction_better=frac, statement=statement)
            elif len(sets) == 1:
                row["statement"] = "one tree set: nothing to compare"
            rows.append(row)
    return pd.DataFrame(rows)


def _statement(analysis, model, top, other, frac, med) -> str:
    what = "the best model on each tree" if model == BEST else f"model '{model}'"
    gap = f"median ln L {med[top]:.2f} vs {med[other]:.2f}"
    if not np.isfinite(frac):
        return f"'{analysis}', {what}: not fitted on both sets"
    if frac >= CLEAR:
        how = f"fits better on '{top}' than on '{other}' consistently across the samples"
    elif frac >= MOST:
        how = f"fits better on '{top}' than on '{other}' for most pairs of trees"
    else:
        how = f"shows no consistent difference between '{top}' and '{other}'"
    return (
        f"'{analysis}' under {what} {how} ({gap}; ln L higher on '{top}' in "
        f"{frac:.0%} of pairs of trees, one from each set)"
    )
