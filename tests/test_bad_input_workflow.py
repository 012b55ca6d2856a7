"""Bad input through the real workflow: a clear message naming the item, and
finished results are kept."""

from __future__ import annotations

from workflow_helpers import run_snakemake, tiny_config

TRAITS = {
    "taxon_column": "taxon",
    "columns": ["glow", "habitat"],
    "order": {"habitat": ["litter", "rock", "canopy"]},
}


def _fails_with(proc, *needles):
    text = proc.stdout + proc.stderr
    assert proc.returncode != 0, text[-2000:]
    for n in needles:
        assert n in text, f"{n!r} not in output:\n{text[-3000:]}"
    assert "Traceback (most recent call last)" not in text, text[-3000:]


def test_missing_tree_file_is_named(tmp_path):
    cfg = tiny_config(tmp_path, trees={"file": str(tmp_path / "nowhere.nex")})
    _fails_with(run_snakemake(tmp_path, cfg, "--dry-run"), "nowhere.nex")


def test_unknown_model_kind_names_the_key(tmp_path):
    cfg = tiny_config(tmp_path, models={"odd": {"kind": "everything_goes"}})
    _fails_with(run_snakemake(tmp_path, cfg, "--dry-run"), "models.odd.kind", "everything_goes")


def test_typo_in_a_config_key_names_it(tmp_path):
    cfg = tiny_config(tmp_path, fitting={"strats": 3})
    _fails_with(run_snakemake(tmp_path, cfg, "--dry-run"), "strats")


def test_transition_with_unknown_state_fails_before_any_job(tmp_path):
    models = {
        "one_rate": {"kind": "equal"},
        "odd": {
            "kind": "custom",
            "applies_to": ["glow"],
            "transitions": {"dull -> sparkly": "gain"},
        },
    }
    cfg = tiny_config(tmp_path, models=models)
    _fails_with(run_snakemake(tmp_path, cfg, "--dry-run"), "sparkly", "odd", "glow")


def test_taxon_missing_from_table_is_named(tmp_path):
    cfg = tiny_config(tmp_path)
    table = tmp_path / "data" / "traits.tsv"
    lines = table.read_text().splitlines()
    dropped = lines[3].split("\t")[0]
    table.write_text("\n".join(lines[:3] + lines[4:]) + "\n")
    _fails_with(run_snakemake(tmp_path, cfg), dropped, "trait table")


def test_trees_with_different_tips_are_named(tmp_path):
    cfg = tiny_config(tmp_path)
    trees = tmp_path / "data" / "trees.nex"
    text = trees.read_text().splitlines()
    # rename one taxon in the third tree only (TRANSLATE numbers are used in the trees,
    # so write that tree with a new label for taxon 1)
    idx = [i for i, line in enumerate(text) if line.strip().startswith("TREE")][2]
    text[idx] = (
        text[idx].replace("(1:", "(Lumasta_intruder:", 1).replace(",1:", ",Lumasta_intruder:", 1)
    )
    trees.write_text("\n".join(text) + "\n")
    _fails_with(run_snakemake(tmp_path, cfg), "tree 2", "Lumasta_intruder")


# Burn-in leaving no trees and unrooted samples: tests/test_catalogue.py (cases 22, 30).
