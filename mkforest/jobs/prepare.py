"""Preparation: select and chunk the trees, code and check the traits."""

from __future__ import annotations

import math

import numpy as np

from ..errors import InputError
from ..seeds import derive_seed


def select_trees(n_total: int, burnin=0, thin: int = 1, sample=None, seed: int = 1,
                 source: str = "trees") -> list:
    """Indices (0-based, in file order) of the trees to use.

    burnin: a fraction below 1 (of n_total, rounded down) or a count of trees;
    then every ``thin``-th tree; then, if ``sample``, that many drawn without
    replacement with the run's seed, kept in file order.
    """
    if burnin < 0:
        raise InputError(f"{source}: trees.burnin must not be negative (got {burnin}).")
    drop = int(math.floor(burnin * n_total)) if burnin < 1 else int(burnin)
    if burnin >= 1 and burnin != int(burnin):
        raise InputError(f"{source}: trees.burnin {burnin} is neither a fraction below 1 nor a "
                         "whole number of trees.")
    kept = list(range(drop, n_total, thin))
    if not kept:
        raise InputError(f"{source}: burn-in of {drop} tree(s) and thinning by {thin} leave no "
                         f"trees (the file holds {n_total}). Lower trees.burnin or trees.thin.")
    if sample is not None and sample < len(kept):
        rng = np.random.default_rng(derive_seed(seed, "tree-sample"))
        kept = sorted(int(i) for i in rng.choice(kept, size=sample, replace=False))
    return kept


def check_same_tips(trees: list, source: str) -> None:
    """Every tree must hold the same taxa."""
    first = set(trees[0].tip_labels)
    for t in trees[1:]:
        tips = set(t.tip_labels)
        if tips != first:
            extra = sorted(tips - first)
            lack = sorted(first - tips)
            parts = []
            if extra:
                parts.append(f"has {', '.join(repr(x) for x in extra[:5])} that tree "
                             f"{trees[0].index} lacks")
            if lack:
                parts.append(f"lacks {', '.join(repr(x) for x in lack[:5])}")
            raise InputError(f"{source}: tree {t.index} {' and '.join(parts)}; every tree in "
                             "the sample must have the same tips.")


def chunk(items: list, per_job: int) -> list:
    return [items[i:i + per_job] for i in range(0, len(items), per_job)]


def data_check(traits: dict, tree_tips, absent: str = "error", source: str = "traits") -> tuple:
    """(rows, problems): a tidy report per trait, and the user mistakes found.

    rows: dicts with trait, item, value (taxa in trees only / table only, counts
    per state, missing, ambiguous, whether the trait varies).
    """
    rows = []
    problems = []
    tips = set(tree_tips)
    for name, t in traits.items():
        taxa = set(t.taxa)
        only_tree = sorted(tips - taxa)
        only_table = sorted(taxa - tips)
        rows.append({"trait": name, "item": "taxa_in_trees_only", "value": len(only_tree),
                     "detail": ",".join(only_tree)})
        rows.append({"trait": name, "item": "taxa_in_table_only", "value": len(only_table),
                     "detail": ",".join(only_table)})
        if only_tree and absent == "error":
            shown = ", ".join(f"'{x}'" for x in only_tree[:5])
            more = f" and {len(only_tree) - 5} more" if len(only_tree) > 5 else ""
            problems.append(f"{source}: taxon {shown}{more} is in the trees but has no row in the "
                            "trait table. Add rows with '?' for unknown values, or set "
                            "traits.absent_taxa: missing.")
        in_tree = np.array([x in tips for x in t.taxa], dtype=bool)
        p = t.possible[in_tree]
        n_states = p.sum(axis=1)
        for i, s in enumerate(t.states):
            rows.append({"trait": name, "item": f"state:{s}", "value": int((p[:, i] & (n_states == 1)).sum()),
                         "detail": ""})
        rows.append({"trait": name, "item": "missing", "value": int((n_states == t.k).sum()), "detail": ""})
        rows.append({"trait": name, "item": "ambiguous", "value": int(((n_states > 1) & (n_states < t.k)).sum()),
                     "detail": ""})
        observed = [s for i, s in enumerate(t.states) if (p[:, i] & (n_states == 1)).any()]
        rows.append({"trait": name, "item": "varies", "value": int(len(observed) >= 2),
                     "detail": "" if len(observed) >= 2 else
                     f"only {observed[0] if observed else 'no'} state observed: not fitted"})
    return rows, problems
