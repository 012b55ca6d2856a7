"""The model kinds and root treatments by name through the real workflow, and the
ordinary sentence a name the program does not know gets."""

from __future__ import annotations

import pandas as pd
import pytest
from workflow_helpers import run_snakemake, tiny_config

from mkforest.data.config import validate_config
from mkforest.engine.models import check_root
from mkforest.errors import InputError


def test_kind_and_root_names_run_end_to_end(tmp_path):
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


def test_an_unknown_kind_gets_the_ordinary_sentence():
    cfg = {
        "traits": {"file": "t.tsv", "taxon_column": "taxon", "columns": ["glow"]},
        "trees": {"file": "t.nex"},
        "models": {"free": {"kind": "unconstraind"}},
    }
    with pytest.raises(InputError, match=r"models\.free\.kind.*Did you mean 'unconstrained'\?"):
        validate_config(cfg)


def test_an_unknown_root_gets_the_ordinary_sentence():
    with pytest.raises(InputError, match=r"models\.x\.root is 'stationry': use uniform.*Did you"):
        check_root("stationry", ("round", "coiled"), "models.x")
    assert check_root("round", ("round", "coiled"), "models.x") == "round"
