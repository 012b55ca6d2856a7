"""Workflow jobs of a trait pair: the bootstrap of one chunk of trees, and the
tables of tests per tree and across trees.

The pair's hypotheses are fitted by the ordinary fit jobs (analysis = pair
name, model = hypothesis name); this module only reads their rows.

Per tree, a test of null hypothesis N nested in alternative A has statistic
2 (ln L_A - ln L_N) from the fits, its chi-square p-value on
n_params(A) - n_params(N) degrees of freedom (Pagel 1994), and, on the trees
chosen for the bootstrap, a parametric-bootstrap p-value (Goldman 1993):
data sets simulated under the null at its fitted rates on that tree (a rate
at or near the lower bound taken at the edge of its 95% interval instead:
mkforest.engine.pairs.simulation_rates), each refitted with the fit jobs' own
settings, so that observed and simulated statistics come from one procedure.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy.special import chdtrc, chdtri  # chi-square sf and isf; lighter than scipy.stats

from ..engine.pairs import bootstrap_p_value, bootstrap_statistics, simulation_rates
from ..engine.summarise import FEW_TREES, finite_quantile

BOOTSTRAP_COLUMNS = [
    "tree_set",
    "pair",
    "null",
    "alternative",
    "tree",
    "replicate",
    "statistic",
    "null_rates_moved",
]
TEST_COLUMNS = [
    "tree_set",
    "pair",
    "null",
    "alternative",
    "tree",
    "statistic",
    "df",
    "p_chi2",
    "p_bootstrap",
    "n_bootstrap",
    "reject_chi2",
    "reject_bootstrap",
    "alpha",
    "boundary",
    "null_rate_at_lower_bound",
    "bootstrap_rates_moved",
    "null_converged",
    "alternative_converged",
    "note",
]
FEW_REPLICATES = 99  # below this, a bootstrap p-value cannot resolve 0.01
LOSS_TOL = 0.01  # an alternative worse than its null by more than this missed its optimum


def bootstrap_tree_indices(used_trees, n_selected: int) -> list:
    """Tree indices (file positions) to bootstrap: ``n_selected`` evenly spaced through the
    used sample, chosen from the whole sample so the choice does not depend on chunking."""
    used = list(used_trees)
    if n_selected >= len(used):
        return used
    pos = np.unique(np.round(np.linspace(0, len(used) - 1, n_selected)).astype(int))
    return [used[i] for i in pos]


def rates_from_rows(model, rows: pd.DataFrame) -> np.ndarray | None:
    """The model's free-rate vector from one tree's rows of a rates table (by parameter label);
    None when a rate is missing or is no estimate (NaN: the fit is impossible there)."""
    by_label = dict(zip(rows["parameter"], rows["rate"]))
    if not all(lab in by_label for lab in model.labels):
        return None
    rates = np.array([float(by_label[lab]) for lab in model.labels])
    return rates if np.isfinite(rates).all() else None


def bootstrap_null_rates(
    tests: list, models: dict, fits: pd.DataFrame, rates: pd.DataFrame
) -> dict:
    """{(null name, tree index): the null's fitted free rates} for bootstrap_chunk, over the
    trees where the null's fit has a finite ln L (an impossible fit, ln L = -inf, has no
    rates to simulate from: that tree gets no bootstrap)."""
    out = {}
    for test in tests:
        model = models[test.null][0]
        ll = fits[fits["model"] == test.null].groupby("tree")["log_likelihood"].first()
        for t, rows in rates[rates["model"] == test.null].groupby("tree"):
            r = rates_from_rows(model, rows)
            if r is not None and np.isfinite(float(ll.get(t, np.nan))):
                out[(test.null, int(t))] = r
    return out


def bootstrap_chunk(
    pair,
    models: dict,
    tests: list,
    trees: list,
    selected: set,
    null_rates: dict,
    n_replicates: int,
    seed: int,
    n_starts: int = 5,
    lower: float = 1e-6,
    upper: float = 1e4,
    max_starts: int = 20,
) -> list:
    """Bootstrap rows for the trees of one chunk that are in ``selected``.

    null_rates: {(null name, tree index): free rates of that null's fit on that tree}
    (missing when the fit failed; such trees are skipped). n_starts, max_starts, lower
    and upper are the fit jobs' settings, so simulated data sets are fitted as the real one was.
    """
    rows = []
    for tree in trees:
        if tree.index not in selected:
            continue
        for test in tests:
            null, root = models[test.null]
            alt, _ = models[test.alternative]
            rates = null_rates.get((test.null, tree.index))
            if rates is None:
                continue
            stats = bootstrap_statistics(
                pair,
                tree,
                null,
                alt,
                rates,
                root,
                replicates=range(n_replicates),
                seed=seed,
                n_starts=n_starts,
                lower=lower,
                upper=upper,
                max_starts=max_starts,
            )
            tips = null.expand_tips(pair.joint_trait().tip_partials(tree, absent="missing"))
            _, moved = simulation_rates(tree, tips, null, rates, root, lower, upper)
            rows += [
                {
                    "tree_set": tree.tree_set,
                    "pair": pair.name,
                    "null": test.null,
                    "alternative": test.alternative,
                    "tree": tree.index,
                    "replicate": r,
                    "statistic": float(s),
                    "null_rates_moved": ",".join(moved),
                }
                for r, s in enumerate(stats)
            ]
    return rows


def pair_test_rows(
    pair_name: str,
    tests: list,
    fits: pd.DataFrame,
    boot: pd.DataFrame,
    alpha: float,
    tree_set: str = "",
) -> list:
    """One row per test x tree (see TEST_COLUMNS) of one tree set: ``fits`` and ``boot``
    hold that set's rows only (tree positions repeat from one set to the next)."""
    f = fits[fits["analysis"] == pair_name].set_index(["model", "tree"])
    rows = []
    for test in tests:
        if test.null not in f.index.get_level_values(
            0
        ) or test.alternative not in f.index.get_level_values(0):
            continue
        trees = sorted(set(f.loc[test.null].index) & set(f.loc[test.alternative].index))
        for t in trees:
            n, a = f.loc[(test.null, t)], f.loc[(test.alternative, t)]
            ll_n, ll_a = float(n["log_likelihood"]), float(a["log_likelihood"])
            notes = []
            if not (np.isfinite(ll_n) and np.isfinite(ll_a)):
                stat = p = np.nan
                impossible = [
                    h for h, ll in ((test.null, ll_n), (test.alternative, ll_a)) if ll == -np.inf
                ]
                notes.append(
                    f"not tested: the data are impossible under {' and '.join(impossible)} "
                    "on this tree (ln L = -inf)"
                    if impossible
                    else "not fitted"
                )
            else:
                if ll_a < ll_n - LOSS_TOL:
                    notes.append(
                        f"the alternative's fit is {ll_n - ll_a:.3g} log-units below its "
                        "null: its optimiser missed the maximum; statistic set to 0"
                    )
                stat = max(0.0, 2.0 * (ll_a - ll_n))
                p = float(chdtrc(test.df, stat))
            mine = (
                boot[
                    (boot["null"] == test.null)
                    & (boot["alternative"] == test.alternative)
                    & (boot["tree"] == t)
                ]
                if len(boot)
                else pd.DataFrame()
            )
            sims = mine["statistic"].to_numpy(float) if len(mine) else np.zeros(0)
            sims = sims[np.isfinite(sims)]
            p_boot = bootstrap_p_value(stat, sims) if sims.size and np.isfinite(stat) else np.nan
            moved = (
                _text(mine["null_rates_moved"].iloc[0])
                if len(mine) and "null_rates_moved" in mine
                else ""
            )
            at_lower = _text(n.get("at_lower"))
            if sims.size and moved:
                notes.append(
                    f"the bootstrap simulated {moved} at the edge of its 95% interval, "
                    "not at its estimate (at or near the lower bound"
                    + (f"; {at_lower} at it" if at_lower else "")
                    + ")"
                )
            conv_n, conv_a = _bool(n["converged"]), _bool(a["converged"])
            if not (conv_n and conv_a):
                which = " and ".join(
                    x for x, ok in ((test.null, conv_n), (test.alternative, conv_a)) if not ok
                )
                notes.append(f"fit of {which} not converged")
            if test.boundary:
                notes.append(
                    "the null forbids rates the alternative leaves free: chi-square "
                    "p-value approximate (conservative); prefer the bootstrap"
                )
            rows.append(
                {
                    "tree_set": tree_set,
                    "pair": pair_name,
                    "null": test.null,
                    "alternative": test.alternative,
                    "tree": int(t),
                    "statistic": stat,
                    "df": test.df,
                    "p_chi2": p,
                    "p_bootstrap": p_boot,
                    "n_bootstrap": int(sims.size),
                    "reject_chi2": bool(p <= alpha) if np.isfinite(p) else np.nan,
                    "reject_bootstrap": bool(p_boot <= alpha) if np.isfinite(p_boot) else np.nan,
                    "alpha": alpha,
                    "boundary": test.boundary,
                    "null_rate_at_lower_bound": bool(at_lower),
                    "bootstrap_rates_moved": moved,
                    "null_converged": conv_n,
                    "alternative_converged": conv_a,
                    "note": "; ".join(notes),
                }
            )
    return rows


def _impossible_trees(fits: pd.DataFrame, pair: str, hypotheses, trees) -> int:
    """How many of ``trees`` have a fit of one of ``hypotheses`` with ln L = -inf."""
    f = fits[
        (fits["analysis"] == pair) & fits["model"].isin(hypotheses) & fits["tree"].isin(list(trees))
    ]
    return int(f.loc[f["log_likelihood"].astype(float) == -np.inf, "tree"].nunique())


def _text(x) -> str:
    return "" if x is None or (isinstance(x, float) and np.isnan(x)) else str(x)


def _bool(x) -> bool:
    if isinstance(x, str):
        return x.strip().lower() == "true"
    return bool(x)


def summary_rows(tests: pd.DataFrame, fits: pd.DataFrame, n_replicates: int) -> list:
    """One row per tree set x pair x test, across the set's trees: fraction of trees
    rejecting, the median LR statistic with its central 95 % interval, mean Akaike
    weights of both hypotheses, and plain-words cautions."""
    rows = []
    tests = (
        tests.assign(tree_set=tests["tree_set"].fillna(""))
        if "tree_set" in tests
        else tests.assign(tree_set="")
    )
    fit_sets = (
        fits["tree_set"].fillna("").astype(str)
        if "tree_set" in fits
        else pd.Series("", index=fits.index)
    )
    for (ts, pair, null, alt), g in tests.groupby(
        ["tree_set", "pair", "null", "alternative"], sort=False
    ):
        ok = g[np.isfinite(g["statistic"].astype(float))]
        boot = ok[np.isfinite(ok["p_bootstrap"].astype(float))]
        mine = fits[(fits["analysis"] == pair) & ((fit_sets == ts) | (ts == ""))]
        w = mine.groupby("model")["weight"].mean() if "weight" in fits else pd.Series(dtype=float)
        alpha = float(g["alpha"].iloc[0])
        df = int(g["df"].iloc[0])
        row = {
            "tree_set": ts,
            "pair": pair,
            "null": null,
            "alternative": alt,
            "df": df,
            "alpha": alpha,
            "n_trees": len(ok),
            "n_impossible": _impossible_trees(fits, pair, (null, alt), g["tree"]),
            "fraction_reject_chi2": float(ok["reject_chi2"].astype(bool).mean())
            if len(ok)
            else np.nan,
            "n_trees_bootstrap": len(boot),
            "fraction_reject_bootstrap": float(boot["reject_bootstrap"].astype(bool).mean())
            if len(boot)
            else np.nan,
            "median_statistic": float(ok["statistic"].median()) if len(ok) else np.nan,
            "statistic_low95": finite_quantile(ok["statistic"], 0.025),
            "statistic_high95": finite_quantile(ok["statistic"], 0.975),
            "critical_chi2": float(chdtri(df, alpha)),
            "median_p_chi2": float(ok["p_chi2"].median()) if len(ok) else np.nan,
            "median_p_bootstrap": float(boot["p_bootstrap"].median()) if len(boot) else np.nan,
            "null_mean_weight": float(w.get(null, np.nan)),
            "alternative_mean_weight": float(w.get(alt, np.nan)),
            "n_not_converged": int(
                (
                    ~(ok["null_converged"].astype(bool) & ok["alternative_converged"].astype(bool))
                ).sum()
            ),
            "n_bootstrap_null_at_bound": int(boot["null_rate_at_lower_bound"].astype(bool).sum()),
            "boundary": bool(g["boundary"].iloc[0]),
        }
        row["caution"] = summary_cautions(row, n_replicates)
        rows.append(row)
    return rows


def summary_cautions(row: dict, n_replicates: int) -> str:
    words = []
    impossible = (
        (
            f"{row['n_impossible']} of {row['n_trees'] + row['n_impossible']} trees left "
            "out: a fit is impossible there (ln L = -inf)"
        )
        if row.get("n_impossible")
        else ""
    )
    if row["n_trees"] == 0:
        return "; ".join(x for x in ("not tested: no tree has both fits", impossible) if x)
    if impossible:
        words.append(impossible)
    if row["n_not_converged"]:
        words.append(
            f"{row['n_not_converged']} of {row['n_trees']} trees have a fit that did not "
            "converge; their statistics may be off"
        )
    if row["n_trees"] < FEW_TREES:
        words.append(
            f"only {row['n_trees']} tree{'' if row['n_trees'] == 1 else 's'}: the spread across trees is rough"
        )
    if row["boundary"]:
        words.append(
            "the null sits on the boundary of the alternative (it forbids rates the "
            "alternative leaves free): the chi-square p-value is only approximate"
        )
    if row["n_trees_bootstrap"] and n_replicates < FEW_REPLICATES:
        words.append(
            f"{n_replicates} bootstrap data sets per tree: the smallest possible "
            f"bootstrap p-value is {1 / (n_replicates + 1):.3g}"
        )
    if row["n_bootstrap_null_at_bound"]:
        words.append(
            f"on {row['n_bootstrap_null_at_bound']} of {row['n_trees_bootstrap']} "
            "bootstrapped trees the null's fit has a rate at the lower bound: there "
            "the bootstrap simulated it at the edge of its 95% interval, not at zero"
        )
    if row["n_trees_bootstrap"] and row["n_trees_bootstrap"] < row["n_trees"]:
        words.append(
            f"bootstrap p-values from {row['n_trees_bootstrap']} of {row['n_trees']} trees"
        )
    return "; ".join(words)
