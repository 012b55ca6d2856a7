"""Preparation: select and chunk the trees, code and check the traits."""

from __future__ import annotations

import math

import numpy as np

from ..data.trees import TreeArrays, looks_like_chain_start
from ..errors import InputError
from ..seeds import derive_seed


def burnin_count(n_total: int, burnin) -> int:
    """Trees dropped from the start: a fraction below 1 of n_total (rounded down), or a count."""
    return min(n_total, int(math.floor(burnin * n_total)) if burnin < 1 else int(burnin))


def select_trees(
    n_total: int, burnin=0, thin: int = 1, sample=None, seed: int = 1, source: str = "trees"
) -> list:
    """Indices (0-based, in file order) of the trees to use.

    burnin: a fraction below 1 (of n_total, rounded down) or a count of trees;
    then every ``thin``-th tree; then, if ``sample``, that many drawn without
    replacement with the run's seed, kept in file order.
    """
    if burnin < 0:
        raise InputError(f"{source}: trees.burnin must not be negative (got {burnin}).")
    drop = burnin_count(n_total, burnin)
    if burnin >= 1 and burnin != int(burnin):
        raise InputError(
            f"{source}: trees.burnin {burnin} is neither a fraction below 1 nor a "
            "whole number of trees."
        )
    kept = list(range(drop, n_total, thin))
    if not kept:
        raise InputError(
            f"{source}: burn-in of {drop} tree(s) and thinning by {thin} leave no "
            f"trees (the file holds {n_total}). Lower trees.burnin or trees.thin."
        )
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
            what = _tip_difference(tips, first, f" that tree {trees[0].index} lacks")
            raise InputError(
                f"{source}: tree {t.index} {what}; every tree in "
                "the sample must have the same tips."
            )


def _tip_difference(tips: set, reference: set, extra_note: str = "") -> str:
    """'has 'a', 'b'[note] and lacks 'c'': up to five taxa each way."""
    extra, lack = sorted(tips - reference), sorted(reference - tips)
    parts = []
    if extra:
        parts.append(f"has {', '.join(repr(x) for x in extra[:5])}{extra_note}")
    if lack:
        parts.append(f"lacks {', '.join(repr(x) for x in lack[:5])}")
    return " and ".join(parts)


def check_tree_lengths(trees: list, source: str) -> None:
    """Every tree must have some length: on a tree whose branches are all 0 (after
    trees.min_branch_length) no change can happen, every trait that varies is impossible
    under every model, and the rate bounds (set from the tree's height) mean nothing."""
    flat = [t.index for t in trees if not t.total_length > 0]
    if flat:
        more = (
            f" (and {len(flat) - 1} more: {', '.join(map(str, flat[1:6]))}"
            f"{', ...' if len(flat) > 6 else ''})"
            if len(flat) > 1
            else ""
        )
        raise InputError(
            f"{source}: tree {flat[0]}{more} has no length: every branch is 0, so no "
            "trait can change along it. Give the trees branch lengths (a dated or "
            "otherwise scaled tree), leave that tree out, or set "
            "trees.min_branch_length to give every branch a small length."
        )


def chain_start(tree: TreeArrays) -> str:
    """Why ``tree`` looks like a sampler's starting tree, or "" (``looks_like_chain_start``)."""
    return looks_like_chain_start(tree.length[:-1])


def short_branches(tree: TreeArrays, minimum: float = 0.0) -> dict:
    """What a tree holds of zero-length (or, with ``minimum``, shorter) branches, as read.

    zero_tips: labels of tips on a zero-length branch; zero_internal: internal
    branches of length zero; below_minimum: branches (any) shorter than ``minimum``.
    The root has no branch and is never counted.
    """
    lengths = tree.length[:-1]  # every node but the root (the last node)
    zero = lengths == 0
    return {
        "zero_tips": [tree.tip_labels[v] for v in np.flatnonzero(zero[: tree.n_tips])],
        "zero_internal": int(zero[tree.n_tips :].sum()),
        "below_minimum": int((lengths < minimum).sum()) if minimum else 0,
    }


def lengthen_branches(tree: TreeArrays, minimum) -> TreeArrays:
    """Every branch shorter than ``minimum`` set to ``minimum`` (trees.min_branch_length).

    Tips joined by zero-length branches are at distance zero: a trait that differs
    between them has likelihood zero under every model. Giving every branch a small
    positive length is the usual remedy (common practice); the count of branches
    changed is reported in the data check and the methods text.
    """
    if not minimum:
        return tree
    length = tree.length.copy()
    body = length[:-1]
    body[body < minimum] = minimum
    return TreeArrays(
        tree.tip_labels, tree.parent, length, tree.child_ptr, tree.children, tree.index
    )


def zero_distance_groups(tree: TreeArrays) -> list:
    """Groups (lists of tip numbers, two or more) of tips at distance zero from one another:
    joined through branches of length zero only."""
    parent = tree.parent
    top = np.arange(tree.n_nodes)
    for v in range(tree.n_nodes - 2, -1, -1):  # preorder: a parent's group is known first
        if tree.length[v] == 0:
            top[v] = top[parent[v]]
    groups: dict = {}
    for v in range(tree.n_tips):
        groups.setdefault(int(top[v]), []).append(v)
    return [g for g in groups.values() if len(g) > 1]


def impossible_tips(tree: TreeArrays, trait) -> list:
    """Groups of tips at distance zero whose data share no state: [(label, cell text), ...] per
    group. On such a tree the trait's likelihood is zero under every model."""
    row = {t: i for i, t in enumerate(trait.taxa)}
    out = []
    for group in zero_distance_groups(tree):
        labels = [tree.tip_labels[v] for v in group if tree.tip_labels[v] in row]
        possible = [trait.possible[row[lab]] for lab in labels]
        if len(possible) > 1 and not np.logical_and.reduce(possible).any():
            out.append(
                [
                    (lab, "|".join(s for s, ok in zip(trait.states, p) if ok))
                    for lab, p in zip(labels, possible)
                    if not p.all()
                ]
            )
    return out


def tree_check_rows(summary: dict, used: list, tree_set: str = "") -> list:
    """data_check rows about one tree set (trait '(trees)'): trees in the file, dropped as
    burn-in, used, whether mkforest re-rooted them (``trees.root``), the file's features and
    what was done with them (``trees.tree_file_features``: items ``file_translate_table``
    ...), and per tree the tips on zero-length branches. Every row names its ``tree_set``."""
    rows = [
        dict(trait="(trees)", item="trees_in_file", value=summary["n_in_file"], detail=""),
        dict(trait="(trees)", item="dropped_as_burnin", value=summary["burnin_dropped"], detail=""),
        dict(trait="(trees)", item="trees_used", value=len(used), detail=""),
        dict(
            trait="(trees)",
            item="rerooted_by_mkforest",
            value=int(summary.get("root") is not None),
            detail=summary.get("rooting", ""),
        ),
    ]
    for item, words in summary.get("file_features", []):
        rows.append(dict(trait="(trees)", item=f"file_{item}", value=1, detail=words))
    if summary.get("without_lengths"):
        rows.append(
            dict(
                trait="(trees)",
                item="trees_without_lengths",
                value=summary["without_lengths"],
                detail="read with one unit of length per branch (every model: branches: unit)",
            )
        )
    if summary.get("first_kept"):
        rows.append(
            dict(
                trait="(trees)",
                item="first_tree_looks_like_chain_start",
                tree=summary["first_kept"]["tree"],
                value=1,
                detail=f"{summary['first_kept']['why']}: a sampler's starting tree? Raise "
                "trees.burnin to drop it",
            )
        )
    total_zero = sum(len(r["zero_tips"]) + r["zero_internal"] for r in used)
    rows.append(
        dict(
            trait="(trees)",
            item="zero_length_branches",
            value=total_zero,
            detail=f"on {sum(1 for r in used if r['zero_tips'] or r['zero_internal'])} "
            "trees, as read",
        )
    )
    minimum = summary.get("min_branch_length")
    rows.append(
        dict(
            trait="(trees)",
            item="branches_lengthened",
            value=sum(r["below_minimum"] for r in used),
            detail=f"to trees.min_branch_length {minimum:g}"
            if minimum
            else "none (trees.min_branch_length not set)",
        )
    )
    for r in used:
        if r["zero_tips"]:
            rows.append(
                dict(
                    trait="(trees)",
                    item="zero_length_tips",
                    tree=r["tree"],
                    value=len(r["zero_tips"]),
                    detail=", ".join(r["zero_tips"]),
                )
            )
    return [dict(r, tree_set=tree_set) for r in rows]


def check_same_taxa_across_sets(firsts: dict) -> None:
    """Every tree set must hold the same taxa. firsts: {set name: (a tree, its source)}."""
    items = list(firsts.items())
    name0, (tree0, source0) = items[0]
    tips0 = set(tree0.tip_labels)
    for name, (tree, source) in items[1:]:
        tips = set(tree.tip_labels)
        if tips != tips0:
            raise InputError(
                f"tree set '{name}' ({source}) {_tip_difference(tips, tips0)} compared with "
                f"tree set '{name0}' ({source0}); tree sets are compared on the same "
                "taxa, so every set must have the same tips."
            )


# trees.per_job: auto. Every job pays a start-up (Python, NumPy, SciPy, numba and the
# package: about 1.3 s of CPU, measured in benchmarks/bench_workflow.py), so a job
# gets at least this many trees when there are that many ...
AUTO_MIN_TREES = 250
# ... and at most this many tree-tips, which bounds a job's memory (measured: see
# docs/cluster.md, "How the work divides at scale").
AUTO_MAX_TREE_TIPS = 1_000_000


def auto_trees_per_job(n_trees: int, n_tips: int, fits_per_tree: int, slots: int) -> int:
    """Trees per fit job for ``trees.per_job: auto``.

    Aims at two fit jobs per slot (cores, or cluster jobs) so that no slot idles
    while another finishes a long job; then at least AUTO_MIN_TREES trees per job
    (start-up is paid once per job) and at most AUTO_MAX_TREE_TIPS / n_tips.
    The result depends on the machine, never the fits: a tree's fit depends only
    on its own seed."""
    chunks = max(1, math.ceil(2 * max(1, slots) / max(1, fits_per_tree)))
    per_job = max(math.ceil(n_trees / chunks), min(n_trees, AUTO_MIN_TREES))
    return max(1, min(per_job, AUTO_MAX_TREE_TIPS // max(1, n_tips)))


def chunk(items: list, per_job: int) -> list:
    return [items[i : i + per_job] for i in range(0, len(items), per_job)]


def impossible_rows(traits: dict, trees: list) -> list:
    """data_check rows, per trait and tree, naming tips at distance zero with no state in common."""
    rows = []
    for name, t in traits.items():
        for tree in trees:
            groups = impossible_tips(tree, t)
            if groups:
                detail = "; ".join(
                    " vs ".join(f"{lab} ({cell})" for lab, cell in g) for g in groups
                )
                rows.append(
                    dict(
                        trait=name,
                        item="impossible_zero_length_tips",
                        tree_set=tree.tree_set,
                        tree=tree.index,
                        value=sum(len(g) for g in groups),
                        detail=detail,
                    )
                )
    return rows


def combined_state_rows(traits: dict, separator: str = "|") -> list:
    """data_check rows for traits whose state labels look like polymorphic cells
    (``0/1`` beside ``0`` and ``1``) that traits.separator did not split."""
    from ..data.traits import combined_states

    rows = []
    for name, t in traits.items():
        for sep, labels in combined_states(t.states, separator).items():
            rows.append(
                dict(
                    trait=name,
                    item="states_look_combined",
                    value=len(labels),
                    detail=f"{', '.join(labels)}: read as states of their own; if they are "
                    f"polymorphic cells, set traits.separator: '{sep}'",
                )
            )
    return rows


def match_spaces(traits: dict, tree_tips) -> tuple:
    """(traits, {table name: tip}): table taxa renamed to the tree tip they match once
    spaces and underscores count as one (in unquoted Newick and NEXUS names an underscore
    stands for a space), where the exact name is no tip."""
    from dataclasses import replace

    tips = set(tree_tips)
    by_key: dict = {}
    for tip in tree_tips:
        by_key.setdefault(tip.replace("_", " "), []).append(tip)
    renamed: dict = {}
    out = {}
    for name, t in traits.items():
        new = []
        for x in t.taxa:
            match = by_key.get(x.replace("_", " "), [])
            if x not in tips and len(match) == 1 and match[0] not in t.taxa:
                renamed[x] = match[0]
                new.append(match[0])
            else:
                new.append(x)
        out[name] = replace(t, taxa=tuple(new))
    return out, renamed


def name_difference(table: str, tip: str) -> str:
    """What differs between a table name and a tree tip that nearly match: case, spaces,
    underscores, or a suffix ('' when they are not near)."""
    if table.lower() == tip.lower():
        return "case"
    a, b = table.replace("_", " ").lower(), tip.replace("_", " ").lower()
    if " ".join(a.split()) == " ".join(b.split()):
        return "spaces"
    if a.startswith(b) or b.startswith(a):
        return "a suffix"
    return ""


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
        rows.append(
            {
                "trait": name,
                "item": "taxa_in_trees_only",
                "value": len(only_tree),
                "detail": ",".join(only_tree),
            }
        )
        rows.append(
            {
                "trait": name,
                "item": "taxa_in_table_only",
                "value": len(only_table),
                "detail": ",".join(only_table),
            }
        )
        if only_tree and absent == "error":
            shown = ", ".join(f"'{x}'" for x in only_tree[:5])
            more = f" and {len(only_tree) - 5} more" if len(only_tree) > 5 else ""
            close = [
                (x, y, name_difference(y, x))
                for x in only_tree
                for y in only_table
                if name_difference(y, x)
            ]
            hint = (
                f" The table has '{close[0][1]}' where the trees have '{close[0][0]}' (they "
                f"differ in {close[0][2]}): names must match exactly, including case and "
                "spaces."
                if close
                else ""
            )
            problems.append(
                f"{source}: taxon {shown}{more} is in the trees but has no row in the "
                "trait table. Add rows with '?' for unknown values, or set "
                f"traits.absent_taxa: missing.{hint}"
            )
        in_tree = np.array([x in tips for x in t.taxa], dtype=bool)
        p = t.possible[in_tree]
        n_states = p.sum(axis=1)
        for i, s in enumerate(t.states):
            rows.append(
                {
                    "trait": name,
                    "item": f"state:{s}",
                    "value": int((p[:, i] & (n_states == 1)).sum()),
                    "detail": "",
                }
            )
        rows.append(
            {"trait": name, "item": "missing", "value": int((n_states == t.k).sum()), "detail": ""}
        )
        rows.append(
            {
                "trait": name,
                "item": "ambiguous",
                "value": int(((n_states > 1) & (n_states < t.k)).sum()),
                "detail": "",
            }
        )
        observed = [s for i, s in enumerate(t.states) if (p[:, i] & (n_states == 1)).any()]
        rows.append(
            {
                "trait": name,
                "item": "varies",
                "value": int(len(observed) >= 2),
                "detail": ""
                if len(observed) >= 2
                else f"only {observed[0] if observed else 'no'} state observed: not fitted",
            }
        )
    return rows, problems
