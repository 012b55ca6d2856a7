"""The data and trees paragraph of the methods text."""

from __future__ import annotations

from pathlib import Path

from ...data.config import tree_sets
from ..methods_branches import (
    first_set,
)
from .numbers import listing, ordinal, plural

# --------------------------------------------------------------------------- paragraphs


def data_paragraph(config, tables) -> str:
    check = tables["data_check"]
    used = tables["trees_used"]
    parts, missing, ambiguous = [], False, False
    for trait in config["traits"]["columns"]:
        rows = check[check["trait"] == trait].set_index("item")["value"]
        states = [i.split(":", 1)[1] for i in rows.index if str(i).startswith("state:")]
        scored = int(sum(int(rows[f"state:{s}"]) for s in states) + int(rows.get("ambiguous", 0)))
        extra = []
        if int(rows.get("ambiguous", 0)):
            extra.append(f"{int(rows['ambiguous'])} of them ambiguous")
            ambiguous = True
        if int(rows.get("missing", 0)):
            missing = True
        detail = f"; {', '.join(extra)}" if extra else ""
        parts.append(
            f"{trait} ({len(states)} states: {', '.join(states)}; scored for {scored} taxa{detail})"
        )
    n_tips = int(used["n_tips"].iloc[0])
    text = (
        f"We analysed {plural(len(parts), 'categorical trait')} of {n_tips} taxa: {listing(parts)}."
    )
    only = check[check["item"] == "taxa_in_table_only"]
    if len(only) and int(only["value"].max()) > 0:
        row = only.sort_values("value").iloc[-1]
        names = [x for x in str(row["detail"]).split(",") if x]
        shown = listing(names[:10]) + (f" and {len(names) - 10} more" if len(names) > 10 else "")
        text += (
            f" {plural(int(row['value']), 'taxon', 'taxa')} of the trait table "
            f"{'is' if int(row['value']) == 1 else 'are'} in none of the trees and "
            f"{'was' if int(row['value']) == 1 else 'were'} not analysed ({shown}; "
            "tables/data_check.tsv)."
        )
    if missing:
        text += " Cells scored as unknown were treated as compatible with every state."
    if ambiguous:
        text += " Ambiguous cells were treated as compatible with each of their listed states."
    return text


def trees_paragraph(config, tables) -> str:
    sets = tree_sets(config)
    tcfg = next(iter(sets.values()))
    used = first_set(tables["trees_used"])
    positions = sorted(int(t) for t in used["tree"])
    n = len(positions)
    name = Path(tcfg["file"]).name + (f" (tree set '{next(iter(sets))}')" if len(sets) > 1 else "")
    if n == 1:
        return (
            f"Every model was fitted on one tree, the tree at position {positions[0]} "
            f"(counted from 0) of {name}; phylogenetic uncertainty was not taken into account."
            + _rooting_sentence(tcfg)
        )
    steps = []
    burnin = tcfg["burnin"]
    counts = tree_counts(tables)
    dropped = counts.get("dropped_as_burnin")
    in_file = counts.get("trees_in_file")
    if dropped is None:  # a run from before these counts were recorded
        dropped = positions[0] if burnin else 0
    of_file = f" of the {in_file} in the file" if in_file is not None else " in the file"
    if dropped == 0:
        steps.append(
            "no trees were discarded as burn-in"
            if burnin == 0
            else f"the burn-in setting ({burnin:g}) discarded none of the trees"
        )
    elif burnin < 1:
        steps.append(
            f"the first {dropped} trees{of_file} ({burnin * 100:g}%) were discarded as burn-in"
            if dropped > 1
            else f"the first tree{of_file} ({burnin * 100:g}%) was discarded as burn-in"
        )
    else:
        steps.append(
            f"the first tree{of_file} was discarded as burn-in"
            if dropped == 1
            else f"the first {dropped} trees{of_file} were discarded as burn-in"
        )
    if tcfg["thin"] > 1:
        steps.append(f"every {ordinal(tcfg['thin'])} tree was kept")
    regular = all(b - a == tcfg["thin"] for a, b in zip(positions, positions[1:]))
    if tcfg.get("sample") is not None and not regular:
        steps.append(f"{n} trees were drawn at random from those left (seed {config['seed']})")
    span = (
        f"positions {positions[0]} to {positions[-1]}"
        if regular and tcfg["thin"] == 1
        else f"{n} positions from {positions[0]} to {positions[-1]}"
    )
    return (
        f"To take phylogenetic uncertainty into account, every model was fitted separately on "
        f"each of {n} {sample_words(tcfg, 'in')} {name}: {listing(steps)}. The trees used "
        f"are listed in tables/trees_used.tsv by their position in the file ({span}, counted "
        "from 0)." + _rooting_sentence(tcfg) + _branch_sentence(tcfg, tables, n)
    )


def sample_words(tcfg, where: str = "") -> str:
    """What the trees are (trees.kind), in the words of a methods text: 'trees of a
    posterior sample', 'bootstrap trees' or 'trees'; with ``where``, the words before
    the file name ('trees from the tree sample in', 'bootstrap trees in')."""
    kind = tcfg.get("kind", "posterior")
    if kind == "posterior":
        return "trees from the tree sample in" if where else "trees of a posterior sample"
    words = "bootstrap trees" if kind == "bootstrap" else "trees"
    return f"{words} {where}" if where else words


def tree_counts(tables) -> dict:
    """{item: value} of the tree rows of data_check.tsv (trait '(trees)'), when present."""
    check = tables.get("data_check")
    if check is None or "trait" not in check:
        return {}
    rows = check[(check["trait"] == "(trees)") & (check["item"] != "zero_length_tips")]
    return {r["item"]: int(r["value"]) for r in rows.to_dict("records")}


def _branch_sentence(tcfg, tables, n) -> str:
    """Zero-length branches as read, the minimum length applied, and the trees on which
    tips at distance zero make a trait impossible: counted from data_check.tsv."""
    check = tables.get("data_check")
    if check is None or "item" not in check:
        return ""
    text = ""
    per_tree = check[check["item"] == "zero_length_tips"]
    if len(per_tree):
        text += (
            f" {len(per_tree)} of the {n} trees had tips on branches of length zero "
            f"({int(per_tree['value'].sum())} such tips in all; named per tree in "
            "tables/data_check.tsv)."
        )
    counts = tree_counts(tables)
    if counts.get("trees_without_lengths"):
        text += (
            f" {plural(counts['trees_without_lengths'], 'tree')} had no branch lengths in the "
            "file; every branch was given one unit of length (change per speciation event)."
        )
    minimum = tcfg.get("min_branch_length") or 0
    if minimum:
        text += (
            f" Branches shorter than {minimum:g} were lengthened to {minimum:g} before "
            f"fitting ({plural(counts.get('branches_lengthened', 0), 'branch', 'branches')} "
            "in all)."
        )
    bad = check[check["item"] == "impossible_zero_length_tips"]
    for trait, g in bad.groupby("trait", sort=False):
        k = g["tree"].nunique()
        text += (
            f" On {k} of the {n} trees, tips joined by zero-length branches differ in "
            f"{trait}, which no model allows (likelihood zero); those trees were left out "
            f"of the comparison of {trait}'s models."
        )
    return text


def _rooting_sentence(tcfg) -> str:
    root = tcfg.get("root")
    if root is None:
        return ""
    if root == "midpoint":
        return (
            " The trees were rooted at the midpoint of their longest tip-to-tip path before "
            "fitting."
        )
    out = root["outgroup"]
    return (
        f" The trees were rooted on the {'outgroup' if len(out) > 1 else 'outgroup taxon'} "
        f"{listing(out)}, with the root placed halfway along the branch that separates "
        f"{'it' if len(out) == 1 else 'them'} from the other taxa."
    )
