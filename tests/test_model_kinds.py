"""The model kinds' table (engine/models.KIND_TABLE) covers every kind the config
accepts, and the text and the job order ask it."""

from __future__ import annotations

from pathlib import Path

import pytest
import yaml

from mkforest.data.config import validate_config
from mkforest.engine.hidden import SWITCH_KINDS, with_hidden_classes
from mkforest.engine.models import KIND_TABLE, KINDS, ModelKind, build_model
from mkforest.jobs.shaping import fit_job_weight
from mkforest.report.methods import describe_model
from mkforest.report.words import model_words

SCHEMA = yaml.safe_load(
    (Path(__file__).parents[1] / "workflow/schemas/config.schema.yaml").read_text()
)
MODEL = SCHEMA["properties"]["models"]["additionalProperties"]["properties"]
STATES = ("sand", "rock", "litter")
TRANSITIONS = {"sand -> rock -> litter": "up"}


def table_problems(table: dict) -> list:
    """What the kinds' table lacks against the schema's kinds and switches."""
    out = []
    kinds, switches = MODEL["kind"]["enum"], MODEL["class_switch"]["enum"]
    for k in kinds:
        entry = table.get(k)
        if not isinstance(entry, ModelKind) or entry.name != k:
            out.append(f"{k}: no entry")
            continue
        if not (isinstance(entry.cost, int) and entry.cost >= 1):
            out.append(f"{k}: cost {entry.cost!r}")
        if k != "custom" and not entry.words:
            out.append(f"{k}: no words")
        if k in switches and not entry.switch_words:
            out.append(f"{k}: no words as a class switch")
    out += [f"{k}: not a kind of the schema" for k in table if k not in kinds]
    return out


def test_the_table_covers_every_kind():
    assert table_problems(KIND_TABLE) == []
    assert tuple(KIND_TABLE) == KINDS
    assert set(SWITCH_KINDS) == set(MODEL["class_switch"]["enum"])


@pytest.mark.parametrize("fact", ["words", "switch_words", "cost"])
def test_the_check_fails_when_a_kind_lacks_a_fact(fact):
    import dataclasses

    broken = dict(
        KIND_TABLE, symmetric=dataclasses.replace(KIND_TABLE["symmetric"], **{fact: None})
    )
    assert any(p.startswith("symmetric:") for p in table_problems(broken))
    less = {k: v for k, v in KIND_TABLE.items() if k != "equal"}
    assert "equal: no entry" in table_problems(less)


@pytest.mark.parametrize("kind", KINDS)
def test_text_and_weights_come_from_the_table(kind):
    model = build_model(kind, STATES, TRANSITIONS if kind == "custom" else None, "m")
    entry = KIND_TABLE[kind]
    if entry.words:
        assert model_words(model) == entry.words
        assert describe_model(model).startswith(entry.words)
    cfg = validate_config(
        {
            "run": "x",
            "trees": {"file": "t.nex"},
            "traits": {"file": "t.tsv", "columns": ["habitat"]},
            "models": {"m": {"kind": kind, "applies_to": ["habitat"], "transitions": TRANSITIONS}}
            if kind == "custom"
            else {"m": {"kind": kind}},
        }
    )
    assert fit_job_weight(cfg, "habitat", "m") == entry.cost


@pytest.mark.parametrize("switch", SWITCH_KINDS)
def test_class_switch_words_come_from_the_table(switch):
    model = with_hidden_classes(build_model("equal", STATES, None, "m"), 2, switch, "m")
    assert KIND_TABLE[switch].switch_words in describe_model(model)
