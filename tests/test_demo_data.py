"""`make demo` writes the demo data through the workflow's make_demo_data rule, and
demo/data/truth.yaml (promised in the README) comes with it."""

from __future__ import annotations

import yaml
from workflow_helpers import run_snakemake

from mkforest.demo import TRUE_RATES


def test_make_demo_data_writes_the_truth_beside_the_data(tmp_path):
    cfg = tmp_path / "config.yaml"
    cfg.write_text(
        yaml.safe_dump(
            {
                "run": "demo",
                "trees": {"file": "demo/data/trees.nex"},
                "traits": {"file": "demo/data/traits.tsv", "columns": ["glow"]},
                "models": {"one": {"kind": "equal"}},
            }
        )
    )
    proc = run_snakemake(tmp_path, cfg, "demo/data/truth.yaml", cores=1)
    assert proc.returncode == 0, (proc.stdout + proc.stderr)[-3000:]
    data = tmp_path / "demo" / "data"
    truth = yaml.safe_load((data / "truth.yaml").read_text())
    assert truth["true_rates"] == TRUE_RATES
    assert truth["n_trees"] == sum(
        1
        for line in (data / "trees.nex").read_text().splitlines()
        if line.strip().startswith("TREE ")
    )
    assert (data / "true_tree.nwk").read_text().strip().endswith(";")
    assert not list(data.glob(".mkforest-writing-*"))
