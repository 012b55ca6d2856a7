"""The branch-length treatment registry: every treatment carries every fact, every
stage asks it, and the two parsers are the inverses of the label writer."""

from __future__ import annotations

import dataclasses
import math
import re

import numpy as np
import pytest

from mkforest.data.trees import parse_newick
from mkforest.engine.branches import effective_lengths
from mkforest.engine.treatments import (
    HEIGHT,
    HELD_GEOMETRIC,
    HELD_TIPS,
    HELD_TOTAL,
    LOG,
    REGISTRY,
    SAME,
    Treatment,
    TreatmentKind,
    parse_label,
    parse_treatment,
)
from mkforest.errors import InputError
from mkforest.report.citations import REFERENCES
from mkforest.report.methods_branches import treatment_words
from mkforest.report.plots_branches import treatment_colour

PARAMETER_FACTS = (
    "code",
    "parameter",
    "symbol",
    "fixed_range",
    "scale",
    "box",
    "null",
    "null_x",
    "step",
    "held",
)
TREE = parse_newick("((a:0.3,b:0.1):0.2,(c:0.25,(d:0.05,e:0.05):0.1):0.35);")
TREE_FLAT = parse_newick("((a:1,b:2):1,c:0.5);")


def registry_problems(registry: dict) -> list:
    """Every fact a registered treatment lacks or gets wrong, one sentence each."""
    out = []
    codes = [k.code for k in registry.values() if k.code is not None]
    if len(codes) != len(set(codes)):
        out.append(f"compiled codes repeat: {codes}")
    for name, k in registry.items():
        if not isinstance(k, TreatmentKind) or k.name != name:
            out.append(f"{name}: entry named {getattr(k, 'name', None)!r}")
            continue
        if not k.words or not isinstance(k.words, str):
            out.append(f"{name}: no words")
        if not re.fullmatch(r"#[0-9a-f]{6}", str(k.colour)):
            out.append(f"{name}: colour {k.colour!r}")
        if k.source is not None and k.source not in REFERENCES:
            out.append(f"{name}: source {k.source!r} not in the references")
        if k.code is None:
            extra = [f for f in PARAMETER_FACTS if getattr(k, f) is not None]
            if extra or k.box_edges:
                out.append(f"{name}: no parameter, yet {extra or 'box_edges'}")
            continue
        missing = [f for f in PARAMETER_FACTS if getattr(k, f) is None]
        if missing:
            out.append(f"{name}: lacks {missing}")
            continue
        if k.source is None:
            out.append(f"{name}: an estimated treatment cites no source")
        if k.scale not in (SAME, LOG, HEIGHT) or (k.scale == LOG and k.theta_box is None):
            out.append(f"{name}: scale {k.scale!r}")
        if k.held not in (HELD_TOTAL, HELD_TIPS, HELD_GEOMETRIC):
            out.append(f"{name}: held {k.held!r}")
        if not set(k.box_edges) <= {"lower", "upper"}:
            out.append(f"{name}: box edges {k.box_edges!r}")
        if not (k.step > 0 and k.box[0] <= k.null_x <= k.box[1]):
            out.append(f"{name}: step {k.step} or box {k.box} around the null {k.null_x}")
        lo, hi = k.fixed_range
        if not lo <= k.null <= hi:
            out.append(f"{name}: null {k.null} outside {k.fixed_range}")
        if not re.fullmatch(r"[a-z_]+", k.parameter) or k.parameter == "a":
            out.append(f"{name}: parameter name {k.parameter!r} (a word users read)")
        t = Treatment(name)
        for tree in (TREE, TREE_FLAT):
            if t.x_of(k.null, tree) != k.null_x or t.theta(k.null_x, tree) != k.null:
                out.append(f"{name}: null {k.null} and null_x {k.null_x} disagree")
    return out


def test_every_registered_treatment_has_every_fact():
    assert registry_problems(REGISTRY) == []


@pytest.mark.parametrize("fact", PARAMETER_FACTS + ("words", "colour", "source"))
def test_the_check_fails_when_a_treatment_lacks_a_fact(fact):
    """The check above can fail: each fact removed in turn from one treatment is named."""
    broken = dict(REGISTRY)
    broken["delta"] = dataclasses.replace(REGISTRY["delta"], **{fact: None})
    if fact == "code":  # without its code delta reads as parameter-free: the extras are named
        assert any("no parameter, yet" in p for p in registry_problems(broken))
    else:
        assert any(p.startswith("delta:") for p in registry_problems(broken))


@pytest.mark.parametrize("name", [n for n, k in REGISTRY.items() if k.estimable])
def test_the_compiled_code_of_each_treatment_gives_the_lengths_at_its_null(name):
    """The registry's code reaches its own transform: at the null value every treatment
    gives the tree's own lengths (kappa = lambda = delta = 1, rate_change = 0), and off it
    other lengths (to 1e-12: the delta and early_burst forms round)."""
    kind = REGISTRY[name]
    at_null, _ = effective_lengths(TREE, Treatment(name), kind.null_x)
    np.testing.assert_allclose(at_null[:-1], TREE.length[:-1], rtol=1e-12, atol=0)
    off = kind.box[1] if kind.box[1] != kind.null_x else kind.box[0]
    moved, _ = effective_lengths(TREE, Treatment(name), off)
    assert not np.allclose(moved[:-1], TREE.length[:-1])


def test_the_report_asks_the_registry():
    for name, kind in REGISTRY.items():
        assert treatment_colour(name) == kind.colour
        assert treatment_words(name).startswith(kind.words)
        if kind.estimable:
            assert treatment_colour(f"{name}=0.5") == kind.colour


FIXED = [0.0, 1.0, 0.5, 2.75, 1e-7, 0.123456789, 1 / 3, -4.0]


@pytest.mark.parametrize("name", list(REGISTRY))
def test_the_two_parsers_are_inverses_of_the_label(name):
    t = parse_treatment(name, "models.m.branches")
    assert parse_label(t.label) == t
    kind = REGISTRY[name]
    if not kind.estimable:
        return
    for value in FIXED:
        lo, hi = kind.fixed_range
        if not lo <= value <= hi:
            with pytest.raises(InputError, match=f"models.m.branches.{name}"):
                parse_treatment({name: value}, "models.m.branches")
            continue
        t = parse_treatment({name: value}, "models.m.branches")
        back = parse_label(t.label)
        assert back == t and back.fixed == value  # exactly, 1/3 included
    assert parse_label(f"{name}=0").label == f"{name}=0"  # short labels stay short


def test_labels_of_no_treatment():
    for empty in (None, float("nan"), "", "nan", "as_given"):
        assert parse_label(empty) == Treatment()
    for bad in ("kapa", "unit=1", "as_given=0"):
        with pytest.raises(ValueError):
            parse_label(bad)
    assert math.isinf(Treatment("delta").x_of(0.0, TREE))
