"""The ancestral-states paragraph, results and cautions of the methods text."""

from __future__ import annotations

from pathlib import Path

from ..citations import cite
from .models import CRITERION_NAMES
from .numbers import listing, number, plural


def ancestral_paragraph(config, tables) -> str:
    anc = config.get("ancestral", {})
    choice = anc.get("model", "average")
    how = {
        "average": "averaged over models with each tree's Akaike weights",
        "best": f"under the model with the lowest {CRITERION_NAMES[config['criterion']]} on "
        "each tree",
    }.get(choice, f"under the model {choice}")
    clades = tables.get("clades")
    sampled = (
        clades[clades["kind"] == "sampled"] if clades is not None and "kind" in clades else None
    )
    if anc.get("reference_tree"):
        where = f"the clades of the reference tree {Path(anc['reference_tree']).name}"
    elif sampled is not None and len(sampled):
        where = f"the clades of the {sampled['summary_tree'].iloc[0]}, counted from 0 in the file"
    else:
        where = "the clades of the majority-rule consensus of the tree sample " + cite(
            "margush1981"
        )
        consensus = (
            clades[clades["kind"] == "consensus"]
            if clades is not None and "kind" in clades
            else None
        )
        if consensus is not None and len(consensus) == 1:
            where += (
                " (no clade is in more than half of the trees, so the consensus is "
                "unresolved and only its root is reported)"
            )
    named = list(anc.get("clades", {}))
    if named:
        where += f" and at the named {'clade' if len(named) == 1 else 'clades'} {listing(named)}"
    text = ""
    if "ancestral_states" in tables:
        text += (
            f"Marginal ancestral state probabilities {cite('yang1995')} were computed on each "
            f"tree at {where}, {how}, and averaged across the trees that contain each clade."
        )
    maps = anc.get("maps", 0)
    if "transitions" in tables and maps:
        text += (
            f" {plural(maps, 'stochastic character map')} per tree "
            f"{cite('nielsen2002', 'huelsenbeck2003')} gave the expected number of changes "
            "between states along the whole tree."
        )
    return text.strip()


def ancestral_results(analysis, tables) -> str:
    text = []
    states = tables.get("ancestral_states")
    clades = tables.get("clades")
    if states is not None and clades is not None and len(clades):
        top = clades.sort_values("n_tips", ascending=False).iloc[0]
        root = states[(states["analysis"] == analysis) & (states["clade"] == top["clade"])]
        if len(root) and int(top["n_tips"]) == int(clades["n_tips"].max()):
            parts = [
                f"{r['state']} {number(r['mean_probability'])} "
                f"({number(r['probability_low95'])} to {number(r['probability_high95'])})"
                for r in root.to_dict("records")
            ]
            text.append(
                "Mean probabilities of the states at the root across trees (central 95% "
                f"interval): {'; '.join(parts)}."
            )
    trans = tables.get("transitions")
    if trans is not None:
        rows = trans[trans["analysis"] == analysis]
        n_out = int(rows["n_maps_at_upper"].max()) if "n_maps_at_upper" in rows and len(rows) else 0
        left_out = (
            f"; {plural(n_out, 'map')} drawn under fits with a rate the data do not "
            "bound from above left out"
            if n_out
            else ""
        )
        if len(rows) and int(rows["n_maps"].max()) > 0:
            parts = [
                f"{r['from_state']}→{r['to_state']} {number(r['mean_count'], 1)} "
                f"({number(r['count_low95'], 1)} to {number(r['count_high95'], 1)})"
                for r in rows.to_dict("records")
            ]
            text.append(
                f"Expected numbers of changes along the whole tree (mean over "
                f"{int(rows['n_maps'].max())} maps on {plural(int(rows['n_trees'].max()), 'tree')}"
                f"{left_out}, central 95% interval of the maps): {'; '.join(parts)}."
            )
        elif len(rows) and n_out:
            text.append(
                f"No numbers of changes are given: all {n_out} stochastic maps were drawn "
                "under fits with a rate the data do not bound from above, whose change "
                "counts grow with that rate, not with the data."
            )
    return " ".join(text)


def ancestral_cautions(analysis, tables) -> list:
    """Run-wide cautions of the ancestral stage (from the transitions table) and a
    count of the clades whose states carry a caution of their own."""
    out, common = [], set()
    trans = tables.get("transitions")
    if trans is not None:
        for c in dict.fromkeys(trans.loc[trans["analysis"] == analysis, "caution"].astype(str)):
            if c.strip():
                out.append(f"stochastic maps: {c.strip()}")
                common.update(part.strip() for part in c.split(";"))
    states = tables.get("ancestral_states")
    if states is not None:
        rows = states[states["analysis"] == analysis]
        per_clade = rows.groupby("clade", sort=False)["caution"].first().astype(str)
        own = [
            c for c in per_clade if {part.strip() for part in c.split(";") if part.strip()} - common
        ]
        if own:
            out.append(
                f"ancestral states: {len(own)} of {len(per_clade)} clades carry a caution "
                "of their own (few trees contain them, their taxa are not monophyletic, or "
                "their fits did not converge); see the caution column of "
                "tables/ancestral_states.tsv"
            )
    return out
