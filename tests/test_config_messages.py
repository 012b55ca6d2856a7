"""Config mistakes: all reported at once, one sentence each with a 'did you mean'
suggestion (difflib), and nothing of the workflow engine's wrapper text."""

from __future__ import annotations

import pytest
import yaml
from workflow_helpers import run_snakemake, tiny_config

from mkforest.data.config import validate_config
from mkforest.errors import InputError, did_you_mean
from mkforest.jobs.analyses import check_config


def test_three_mistakes_at_once_through_the_workflow(tmp_path):
    models = {
        "one_rate": {"kind": "equal"},
        "loss": {
            "kind": "custom",
            "applies_to": ["glw"],
            "transitions": {"glowing -> dull": "loss"},
        },
    }
    cfg = tiny_config(
        tmp_path,
        fitting={"strats": 2},
        models=models,
        ancestral={"enabled": True, "model": "one_rat"},
    )
    proc = run_snakemake(tmp_path, cfg, "--dry-run")
    assert proc.returncode == 2, proc.stdout + proc.stderr
    lines = [line for line in proc.stderr.splitlines() if line.strip()]
    assert len(lines) == 3, proc.stderr
    assert all(line.startswith(f"mkforest: config file '{cfg}': ") for line in lines), lines
    assert "key 'fitting.strats' is not a known key. Did you mean 'fitting.starts'?" in lines[0]
    assert "trait 'glw'" in lines[1] and "Did you mean 'glow'?" in lines[1]
    assert "ancestral.model is 'one_rat'" in lines[2] and "Did you mean 'one_rate'?" in lines[2]
    text = proc.stdout + proc.stderr
    for wrapper in ("WorkflowError", "common.smk", "Traceback", "line 1", "Snakefile"):
        assert wrapper not in text, text


def _tiny(tmp_path, **overrides):
    return yaml.safe_load(tiny_config(tmp_path, **overrides).read_text())


def test_state_labels_get_suggestions_with_the_other_mistakes(tmp_path):
    models = {
        "one_rate": {"kind": "equal", "root": "litte"},
        "loss": {
            "kind": "custom",
            "applies_to": ["glow"],
            "transitions": {"glowing -> dul": "loss"},
        },
        "odd": {"kind": "symetric"},
    }
    with pytest.raises(InputError) as err:
        check_config(_tiny(tmp_path, models=models), "my.yaml")
    lines = str(err.value).splitlines()
    assert any("models.odd.kind" in x and "Did you mean 'symmetric'?" in x for x in lines), lines
    assert sum("symetric" in x for x in lines) == 1, lines
    # the faulty kind stops only its own model; the table check still names the labels
    assert any("names state 'dul'" in x and "Did you mean 'dull'?" in x for x in lines), lines
    assert any("root is 'litte'" in x and "Did you mean 'litter'?" in x for x in lines), lines


def test_trait_column_missing_from_table_suggests_the_close_one(tmp_path):
    cfg = _tiny(tmp_path)
    cfg["traits"]["columns"] = ["glow", "habitta"]
    cfg["traits"]["order"] = {}
    with pytest.raises(InputError, match=r"no column 'habitta'.*Did you mean 'habitat'\?"):
        check_config(cfg, "my.yaml")


def test_misspelt_top_level_and_nested_keys_each_named():
    cfg = {
        "run": "x",
        "trees": {"file": "t.nex", "brunin": 0.1},
        "traits": {"file": "t.tsv", "columns": ["glow"], "taxon_colum": "taxon"},
        "models": {"one_rate": {"kind": "equal", "applies_too": ["glow"]}},
        "critrion": "aic",
    }
    with pytest.raises(InputError) as err:
        validate_config(cfg, "c.yaml")
    text = str(err.value)
    for wrong, right in [
        ("critrion", "criterion"),
        ("trees.brunin", "trees.burnin"),
        ("traits.taxon_colum", "traits.taxon_column"),
        ("models.one_rate.applies_too", "models.one_rate.applies_to"),
    ]:
        assert f"key '{wrong}' is not a known key. Did you mean '{right}'?" in text, text
    assert len(text.splitlines()) == 4


def test_no_suggestion_when_nothing_is_close():
    assert did_you_mean("zzz", ["equal", "symmetric"]) == ""
    assert did_you_mean("Glow", ["glow", "habitat"]) == " Did you mean 'glow'?"


def test_pair_hypothesis_and_test_names_get_suggestions(tmp_path):
    pairs = {
        "glow_habitat": {"traits": ["glow", "habitat"], "hypotheses": ["independent", "dependant"]}
    }
    with pytest.raises(
        InputError,
        match=r"'dependant' is neither a built-in hypothesis.*"
        r"Did you mean 'dependent'\?",
    ):
        check_config(_tiny(tmp_path, pairs=pairs), "my.yaml")
    pairs["glow_habitat"].update(
        hypotheses=["independent", "dependent"], tests=[["independant", "dependent"]]
    )
    with pytest.raises(
        InputError,
        match=r"tests names hypothesis 'independant'.*"
        r"Did you mean 'independent'\?",
    ):
        check_config(_tiny(tmp_path, pairs=pairs), "my.yaml")
