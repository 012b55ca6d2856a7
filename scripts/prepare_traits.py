"""Code the trait table, check it against the trees, and check every model on it."""

import sys
from pathlib import Path

sys.path.insert(0, str(Path(snakemake.scriptdir).parent))  # noqa: F821

import json
import logging

import pandas as pd

from mkforest.data.traits import (
    column_of,
    read_traits,
    table_header,
    traits_to_json,
    with_written_names,
)
from mkforest.data.trees import load_trees
from mkforest.errors import InputError
from mkforest.jobs.prepare import (
    combined_state_rows,
    data_check,
    impossible_rows,
    match_spaces,
    tree_check_rows,
)
from mkforest.jobs.scripting import run_job

COLUMNS = ["tree_set", "trait", "item", "value", "detail", "tree"]


def main(smk):
    log = logging.getLogger("mkforest")
    tcfg = smk.params.traits
    traits = read_traits(
        smk.input.traits,
        tcfg["taxon_column"],
        tcfg["columns"],
        tcfg["missing"],
        tcfg["separator"],
        tcfg["order"],
    )
    folder = Path(smk.input.chunks)
    trees = [t for p in sorted(folder.glob("chunk_*.npz")) for t in load_trees(p)]
    summary = json.loads((folder / "summary.json").read_text())
    traits, renamed = match_spaces(traits, trees[0].tip_labels)
    if renamed:
        log.info(
            "%d taxa of the table matched tree tips with underscores for spaces (first: '%s' "
            "as '%s')",
            len(renamed),
            *next(iter(renamed.items())),
        )
    rows, problems = data_check(
        traits, trees[0].tip_labels, tcfg["absent_taxa"], f"trait table '{smk.input.traits}'"
    )
    impossible = impossible_rows(traits, trees)
    combined = combined_state_rows(traits, tcfg["separator"])
    for r in combined:
        log.warning("trait '%s': states %s", r["trait"], r["detail"])
    spaced = (
        [
            dict(
                trait="(taxa)",
                item="matched_with_underscores_for_spaces",
                value=len(renamed),
                detail=", ".join(f"{a} = {b}" for a, b in renamed.items()),
            )
        ]
        if renamed
        else []
    )
    header = table_header(smk.input.traits)
    renamed_columns = [
        dict(trait=name, item="column", value=1, detail=column_of(name, header))
        for name in tcfg["columns"]
        if column_of(name, header) != name
    ]
    # a row about the trait table alone holds for every tree set: its tree_set is empty
    per_set = summary.get("sets") or {trees[0].tree_set: summary}
    tree_rows = [r for name, s in per_set.items() for r in tree_check_rows(s, s["trees"], name)]
    table_rows = spaced + renamed_columns + rows + combined
    rows = tree_rows + [dict(r, tree_set="") for r in table_rows] + impossible
    check = pd.DataFrame(rows, columns=COLUMNS).astype({"tree": "Int64"})
    names = {name: t.written for name, t in traits.items()}
    with_written_names(check, names).to_csv(smk.output.check, sep="\t", index=False)
    for r in rows:
        if r["item"] == "taxa_in_table_only" and r["value"]:
            log.warning(
                "trait '%s': %d taxa in the table are in no tree and are ignored: %s",
                r["trait"],
                r["value"],
                r["detail"][:200],
            )
        if r["item"] == "varies" and not r["value"]:
            log.warning("trait '%s': %s", r["trait"], r["detail"])
    for name in traits:
        bad = [r for r in impossible if r["trait"] == name]
        if bad:
            log.warning(
                "trait '%s': on %d of %d trees, tips joined by zero-length branches have "
                "different states (first: tree %d, %s); every model's likelihood is zero "
                "there. Set trees.min_branch_length to fit those trees.",
                name,
                len(bad),
                len(trees),
                bad[0]["tree"],
                bad[0]["detail"][:200],
            )
    if problems:
        raise InputError(problems[0])
    Path(smk.output.coded).write_text(json.dumps(traits_to_json(traits)))


run_job(snakemake, main)  # noqa: F821
