"""One fit job: one analysis x one model x a chunk of trees -> tidy rows."""

from __future__ import annotations

import numpy as np

from ..engine.branches import Treatment
from ..engine.compare import IMPOSSIBLE, information_criteria
from ..engine.fitting import fit_model
from ..engine.hidden import class_notes
from ..seeds import derive_seed

FIT_COLUMNS = [
    "tree_set",
    "analysis",
    "model",
    "tree",
    "n_taxa",
    "n_params",
    "log_likelihood",
    "aic",
    "aicc",
    "bic",
    "converged",
    "n_starts",
    "n_agree",
    "at_lower",
    "at_upper",
    "open_upper",
    "root",
    "branches",
    "branch_parameter",
    "branch_at_bound",
    "note",
    "structure",
]
RATE_COLUMNS = [
    "tree_set",
    "analysis",
    "model",
    "tree",
    "from_state",
    "to_state",
    "rate",
    "parameter",
    "at_bound",
]


def fit_chunk(
    trees: list,
    trait,
    model,
    root: str,
    analysis: str,
    seed: int,
    starts: int = 5,
    lower: float = 1e-6,
    upper: float = 1e4,
    absent: str = "error",
    max_starts: int = 20,
    branches: Treatment | None = None,
) -> tuple:
    """Fit one model to one trait on each tree. Returns (fit rows, rate rows) as dicts."""
    fits, rates = [], []
    treatment = branches or Treatment()
    varies = len(trait.observed_states()) >= 2
    for tree in trees:
        X = trait.tip_partials(tree, absent=absent)
        n = int((X.sum(axis=1) < trait.k).sum())
        row = {
            "tree_set": tree.tree_set,
            "analysis": analysis,
            "model": model.name,
            "tree": tree.index,
            "n_taxa": n,
            "n_params": model.n_params + treatment.n_params,
            "root": root,
            "branches": treatment.label,
            "branch_parameter": treatment.fixed,
            "branch_at_bound": "",
            "structure": f"{model.signature()} | root {root} | branches {treatment.label}",
        }
        if not varies:
            row.update(
                log_likelihood=np.nan,
                aic=np.nan,
                aicc=np.nan,
                bic=np.nan,
                converged=False,
                n_starts=0,
                n_agree=0,
                at_lower="",
                at_upper="",
                open_upper="",
                note="not fitted: fewer than two observed states",
            )
            fits.append(row)
            continue
        res = fit_model(
            tree,
            X,
            model,
            root,
            n_starts=starts,
            seed=derive_seed(seed, tree.index, analysis, model.name),
            lower=lower,
            upper=upper,
            max_starts=max_starts,
            branches=treatment,
        )
        ic = information_criteria(res.log_likelihood, res.n_params, n)
        notes = list(res.notes) + class_notes(model, res)
        possible = bool(np.isfinite(res.log_likelihood))
        if possible and np.isinf(ic["aicc"]):
            notes.append(f"AICc undefined: {n} taxa with data for {res.n_params} rates")
        if res.branch_at_bound:
            notes.append(f"{treatment.name} at its {res.branch_at_bound} bound")
        row.update(
            log_likelihood=res.log_likelihood,
            **ic,
            converged=res.converged,
            n_starts=res.n_starts,
            n_agree=res.n_agree,
            at_lower=",".join(res.at_lower),
            at_upper=",".join(res.at_upper),
            open_upper=",".join(res.open_upper),
            note="; ".join(notes),
            branch_parameter=res.branch_parameter if np.isfinite(res.branch_parameter) else None,
            branch_at_bound=res.branch_at_bound,
        )
        fits.append(row)
        # an impossible fit (ln L = -inf) has no estimate: every rate empty (NaN when read),
        # marked IMPOSSIBLE (a fixed rate too, so that no summary counts the fit)
        bound_of = {
            **{x: "lower" for x in res.at_lower},
            **{x: "open" for x in res.open_upper},
            **{x: "upper" for x in res.at_upper},
        }
        for a, b, p in model.transitions():
            i, j = model.states.index(a), model.states.index(b)
            label = model.labels[p] if p >= 0 else "fixed"
            rates.append(
                {
                    "tree_set": tree.tree_set,
                    "analysis": analysis,
                    "model": model.name,
                    "tree": tree.index,
                    "from_state": a,
                    "to_state": b,
                    "rate": float(res.q_matrix[i, j]) if possible else None,
                    "parameter": label,
                    "at_bound": bound_of.get(label, "") if possible else IMPOSSIBLE,
                }
            )
    return fits, rates
