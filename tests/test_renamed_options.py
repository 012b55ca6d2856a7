"""Every renamed option of the second release through the real workflow, and the
one-sentence message an old name gets (root 'flat'/'equilibrium'/'conditional',
kind 'all_different')."""

from __future__ import annotations

import pandas as pd
import pytest
from workflow_helpers import run_snakemake, tiny_config

from mkforest.data.config import validate_config
from mkforest.errors import InputError


def test_new_names_run_end_to_end(tmp_path):
    models = {
        "one_rate": {"kind": "equal", "root": "uniform"},
        "mirror": {"kind": "symmetric", "root": "stationary"},
        "free": {"kind": "unconstrained", "root": "data_weighted"},
        "lit_root": {"kind": "equal", "applies_to": ["habitat"], "root": "litter"},
    }
    cfg = tiny_config(tmp_path, models=models)
    proc = run_snakemake(tmp_path, cfg)
    assert proc.returncode == 0, proc.stderr[-3000:]
    fits = pd.read_csv(tmp_path / "results/tiny/tables/fits.tsv", sep="\t")
    assert set(fits["model"]) == set(models)
    # an unconstrained 3-state model has 6 rates, equal has 1 (fact of the trade)
    hab = fits[fits["analysis"] == "habitat"].groupby("model")["n_params"].first()
    assert hab["free"] == 6 and hab["one_rate"] == 1 and hab["lit_root"] == 1
    methods = (tmp_path / "results/tiny/methods.md").read_text()
    for word in ("flat", "equilibrium", "all_different"):
        assert word not in methods


@pytest.mark.parametrize(
    "old,new",
    [("flat", "uniform"), ("equilibrium", "stationary"), ("conditional", "data_weighted")],
)
def test_old_root_name_gets_one_sentence(tmp_path, old, new):
    cfg = tiny_config(tmp_path, models={"one_rate": {"kind": "equal", "root": old}})
    proc = run_snakemake(tmp_path, cfg, "--dry-run")
    text = proc.stdout + proc.stderr
    assert proc.returncode != 0
    assert f"models.one_rate.root is '{old}': this root treatment is now called '{new}'" in text
    assert "Traceback" not in text


def test_old_kind_name_gets_one_sentence():
    cfg = {
        "traits": {"file": "t.tsv", "taxon_column": "taxon", "columns": ["glow"]},
        "trees": {"file": "t.nex"},
        "models": {"free": {"kind": "all_different"}},
    }
    with pytest.raises(
        InputError,
        match="models.free.kind is 'all_different': this model kind is now called 'unconstrained'",
    ):
        validate_config(cfg)


def test_a_state_called_like_an_old_root_is_a_fixed_root():
    from mkforest.engine.models import check_root

    assert check_root("flat", ("flat", "coiled"), "models.x") == "flat"
    with pytest.raises(InputError, match="now called 'uniform'"):
        check_root("flat", ("round", "coiled"), "models.x")
