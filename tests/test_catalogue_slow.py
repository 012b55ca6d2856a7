"""The broader input catalogue (make test-slow): larger invented samples through the real
workflow, with the ancestral stage on. Cases are listed in docs/troubleshooting.md (S1, S2)."""

from __future__ import annotations

import json

import numpy as np
import pytest
import yaml
from catalogue_inputs import unresolved_sample, unrooted
from workflow_helpers import run_snakemake

PNG = b"\x89PNG\r\n\x1a\n"


@pytest.mark.slow
def test_unrooted_28_taxon_sample_midpoint_rooted_on_its_best_supported_tree(tmp_path):
    """S1: 28 taxa, 6 unrooted trees with no clade in more than 3 of them, rooted at the
    midpoint, ancestral states drawn on the sampled tree with the highest product of clade
    frequencies."""
    texts = [unrooted(t) for t in unresolved_sample(n_trees=6, n_tips=28, seed=11, p_polytomy=0.1)]
    (tmp_path / "data").mkdir()
    (tmp_path / "data" / "trees.nwk").write_text("\n".join(texts) + "\n")
    rng = np.random.default_rng(4)
    rows = [f"t{i},{rng.choice(['wet', 'dry'])}" for i in range(28)]
    (tmp_path / "data" / "traits.csv").write_text("taxon,habitat\n" + "\n".join(rows) + "\n")
    cfg = tmp_path / "config.yaml"
    cfg.write_text(
        yaml.safe_dump(
            {
                "run": "s1",
                "trees": {"file": "data/trees.nwk", "root": "midpoint"},
                "traits": {"file": "data/traits.csv", "columns": ["habitat"]},
                "models": {"one": {"kind": "equal"}, "two": {"kind": "unconstrained"}},
                "fitting": {"starts": 2},
                "ancestral": {"maps": 10, "summary_tree": "most_supported"},
            }
        )
    )
    proc = run_snakemake(tmp_path, cfg)
    assert proc.returncode == 0, (proc.stdout + proc.stderr)[-4000:]
    run = tmp_path / "results" / "s1"
    assert (run / "plots" / "ancestral_trees" / "habitat.png").read_bytes()[:8] == PNG
    clades = (run / "tables" / "clades.tsv").read_text()
    assert "\tsampled\t" in clades and "highest product of clade frequencies" in clades
    methods = (run / "methods.md").read_text()
    assert "rooted at the midpoint" in methods and "the clades of the sampled tree" in methods
    manifest = json.loads((run / "manifest.json").read_text())
    assert manifest["trees"]["root"] == "midpoint"


@pytest.mark.slow
def test_a_single_tree_says_uncertainty_was_not_taken_into_account(tmp_path):
    """S2: one tree instead of a sample."""
    (tmp_path / "data").mkdir()
    (tmp_path / "data" / "tree.nwk").write_text(
        "[&R] ((a:1,b:1):1,((c:1,d:1):0.5,(e:1,f:1):0.5):0.5);\n"
    )
    (tmp_path / "data" / "traits.csv").write_text(
        "taxon,colour\na,red\nb,red\nc,blue\nd,blue\ne,red\nf,blue\n"
    )
    cfg = tmp_path / "config.yaml"
    cfg.write_text(
        yaml.safe_dump(
            {
                "run": "s2",
                "trees": {"file": "data/tree.nwk"},
                "traits": {"file": "data/traits.csv", "columns": ["colour"]},
                "models": {"one": {"kind": "equal"}},
                "fitting": {"starts": 2},
                "ancestral": {"maps": 10},
            }
        )
    )
    proc = run_snakemake(tmp_path, cfg)
    assert proc.returncode == 0, (proc.stdout + proc.stderr)[-4000:]
    methods = (tmp_path / "results" / "s2" / "methods.md").read_text()
    assert (
        "on one tree" in methods
        and "phylogenetic uncertainty was not taken into account" in methods
    )
