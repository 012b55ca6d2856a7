"""Glue of the all-pairs scan: single-trait fits per chunk, pair tests per job, tables.

Per chunk of trees: one job fits every scanned trait once per tree (``singles_rows``),
then ``scan.jobs_per_chunk`` jobs test their share of the pairs (``pair_rows``),
reusing those fits. One summary job adds each tree's Benjamini-Hochberg step
(``per_tree_table``) and the summary across trees (``summary_table``).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..engine.fdr import bh_adjusted
from ..engine.summarise import as_text
from . import scan_plan

SINGLE_COLUMNS = [
    "tree_set",
    "tree",
    "trait",
    "log_likelihood",
    "converged",
    "unbounded",
    "q_matrix",
]
PAIR_COLUMNS = [
    "tree_set",
    "tree",
    "trait_1",
    "trait_2",
    "null",
    "alternative",
    "n_taxa",
    "log_likelihood_null",
    "log_likelihood_alternative",
    "statistic",
    "df",
    "p_value",
    "converged",
    "n_at_upper",
    "note",
]
PER_TREE_COLUMNS = PAIR_COLUMNS[:12] + ["q_value", "discovery", "level"] + PAIR_COLUMNS[12:]
SUMMARY_COLUMNS = [
    "tree_set",
    "trait_1",
    "trait_2",
    "null",
    "alternative",
    "df",
    "n_trees",
    "median_statistic",
    "statistic_low95",
    "statistic_high95",
    "median_p",
    "fraction_discovered",
    "q_value",
    "discovered",
    "level",
    "n_impossible",
    "n_not_converged",
    "n_at_upper",
    "caution",
]
FEW_TREES = 10  # below this the spread across trees is rough (as for pairs)


def _fit_args(config: dict) -> dict:
    f = config["fitting"]
    return dict(
        n_starts=f["starts"], lower=f["lower"], upper=f["upper"], max_starts=f["max_starts"]
    )


def singles_rows(trees: list, traits: dict, config: dict) -> list:
    """Each scanned trait's unconstrained fit on each tree (none with hidden classes:
    the independent hypothesis is then fitted per pair)."""
    from ..engine.scan import fit_single, single_from_result  # the optimiser: fit jobs only

    scan = config["scan"]
    if scan["hidden_classes"] > 1:
        return []
    rows = []
    for tree in trees:
        for name in scan_plan.scanned(config, traits):
            res = fit_single(
                tree,
                traits[name],
                scan["root"],
                config["seed"],
                config["traits"]["absent_taxa"],
                **_fit_args(config),
            )
            s = single_from_result(res)
            rows.append(
                {
                    "tree_set": tree.tree_set,
                    "tree": int(tree.index),
                    "trait": name,
                    "log_likelihood": s.log_likelihood,
                    "converged": s.converged,
                    "unbounded": ",".join(s.at_upper),
                    # the fitted rate matrix, row by row, exact in repr form
                    "q_matrix": " ".join(repr(float(x)) for x in s.q_matrix.ravel()),
                }
            )
    return rows


def read_singles(frame: pd.DataFrame) -> dict:
    """{(tree_set, tree, trait): SingleFit} from a singles table."""
    from ..engine.scan import SingleFit

    out = {}
    for r in frame.to_dict("records"):
        q = np.array([float(x) for x in str(r["q_matrix"]).split()])
        k = int(round(np.sqrt(q.size)))
        unbounded = as_text(pd.Series([r["unbounded"]])).iloc[0]
        out[(str(r["tree_set"]), int(r["tree"]), str(r["trait"]))] = SingleFit(
            float(r["log_likelihood"]),
            q.reshape(k, k),
            str(r["converged"]).lower() == "true",
            tuple(x for x in unbounded.split(",") if x),
        )
    return out


def pair_rows(
    trees: list, traits: dict, config: dict, singles: dict, job: int, n_jobs: int
) -> list:
    """Tests of job ``job``'s share of the pairs on every tree of the chunk."""
    from ..engine.scan import test_pair

    scan = config["scan"]
    mine = scan_plan.pairs_of_job(scan_plan.pairs(config, traits), job, n_jobs)
    rows = []
    for tree in trees:
        for a, b in mine:
            two = None
            if scan["hidden_classes"] == 1:
                two = tuple(singles[(str(tree.tree_set), int(tree.index), t)] for t in (a, b))
            rows += test_pair(
                tree,
                traits[a],
                traits[b],
                two,
                tuple(scan["alternatives"]),
                scan["root"],
                config["seed"],
                config["traits"]["absent_taxa"],
                scan["hidden_classes"],
                scan["class_switch"],
                max_joint=scan["joint_states"],
                **_fit_args(config),
            )
    return rows


def per_tree_table(rows: pd.DataFrame, level: float) -> pd.DataFrame:
    """The pair rows with each tree's Benjamini-Hochberg step: q_value over every test
    (pairs x alternatives) on that tree of that set, discovery = q_value <= level."""
    out = rows.copy()
    out["tree_set"] = as_text(out["tree_set"])
    for col in ("log_likelihood_null", "log_likelihood_alternative", "statistic", "p_value"):
        out[col] = out[col].astype(float)
    out["q_value"] = np.nan
    for _, idx in out.groupby(["tree_set", "tree"], sort=False).groups.items():
        out.loc[idx, "q_value"] = bh_adjusted(out.loc[idx, "p_value"].to_numpy(float))
    q = out["q_value"].to_numpy(float)
    out["discovery"] = np.where(np.isfinite(q), q <= level, False)
    out["level"] = level
    out["note"] = as_text(out["note"])
    order = ["tree_set", "tree", "trait_1", "trait_2", "alternative"]
    return out.sort_values(order, kind="stable")[PER_TREE_COLUMNS].reset_index(drop=True)


def _q(values, prob) -> float:
    v = np.asarray(values, dtype=float)
    v = v[np.isfinite(v)]
    return float(np.quantile(v, prob)) if v.size else np.nan


def summary_table(per_tree: pd.DataFrame, level: float) -> pd.DataFrame:
    """One row per tree set x pair x alternative across trees, sorted by evidence
    (fraction of trees with a discovery, then median p): median statistic with its
    central 95% interval, median p-value, fraction of trees on which the pair is a
    discovery, and the Benjamini-Hochberg q-value of the median p-values across the
    set's pairs (a summary, not a test over trees: trees are not independent data)."""
    rows = []
    keys = ["tree_set", "trait_1", "trait_2", "null", "alternative"]
    for key, g in per_tree.groupby(keys, sort=False):
        ok = g[np.isfinite(g["statistic"].astype(float))]
        row = dict(zip(keys, key))
        row.update(
            df=int(g["df"].iloc[0]),
            n_trees=len(ok),
            median_statistic=float(ok["statistic"].median()) if len(ok) else np.nan,
            statistic_low95=_q(ok["statistic"], 0.025),
            statistic_high95=_q(ok["statistic"], 0.975),
            median_p=float(ok["p_value"].median()) if len(ok) else np.nan,
            fraction_discovered=float(ok["discovery"].astype(bool).mean()) if len(ok) else np.nan,
            level=level,
            n_impossible=int(
                (
                    np.isneginf(g["log_likelihood_null"].astype(float))
                    | np.isneginf(g["log_likelihood_alternative"].astype(float))
                ).sum()
            ),
            n_not_converged=int((~ok["converged"].astype(str).str.lower().eq("true")).sum()),
            n_at_upper=int((ok["n_at_upper"].astype(int) > 0).sum()),
        )
        rows.append(row)
    out = pd.DataFrame(rows, columns=[c for c in SUMMARY_COLUMNS if c not in ("q_value",)])
    out["q_value"] = np.nan
    for _, idx in out.groupby("tree_set", sort=False).groups.items():
        out.loc[idx, "q_value"] = bh_adjusted(out.loc[idx, "median_p"].to_numpy(float))
    q = out["q_value"].to_numpy(float)
    out["discovered"] = np.where(np.isfinite(q), q <= level, False)
    out["caution"] = [cautions(r) for r in out.to_dict("records")]
    out = out.sort_values(
        ["tree_set", "fraction_discovered", "median_p"],
        ascending=[True, False, True],
        kind="stable",
        na_position="last",
    )
    return out[SUMMARY_COLUMNS].reset_index(drop=True)


def cautions(row: dict) -> str:
    """Plain words for what could mislead in one summary row."""
    words = []
    n = int(row["n_trees"])
    if row["n_impossible"]:
        words.append(
            f"{row['n_impossible']} of {n + row['n_impossible']} trees left out: the data "
            "are impossible under a hypothesis there (ln L = -inf)"
        )
    if n == 0:
        return "; ".join(["not tested: no tree has both fits", *words])
    if row["n_not_converged"]:
        words.append(
            f"{row['n_not_converged']} of {n} trees have a fit that did not converge; "
            "their statistics may be off"
        )
    if row["n_at_upper"]:
        words.append(
            f"on {row['n_at_upper']} of {n} trees a rate is at or open to the upper bound "
            "(change too fast for the data to bound it)"
        )
    if n < FEW_TREES:
        words.append(f"only {n} tree{'' if n == 1 else 's'}: the spread across trees is rough")
    return "; ".join(words)


def figure_alternative(summary: pd.DataFrame) -> str:
    """The alternative the figure shows: dependent when tested, else the first."""
    alts = list(dict.fromkeys(summary["alternative"]))
    return "dependent" if "dependent" in alts else alts[0]
