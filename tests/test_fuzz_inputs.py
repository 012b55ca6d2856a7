"""Property-based fuzzing of what users bring (issue 21, item 13): tree text, trait tables
and configs, generated and mutated from valid ones. Every input ends in a result or in one
of our own error sentences (InputError, which the jobs print as one line), never in
another exception (a traceback for the user).

The readers fuzzed here are the ones the workflow's jobs and `mkforest init` call:
`read_trees` (fast reader and DendroPy path), `read_traits`, `check_config` and
`starting_config`. Default suite: a few hundred examples in all; `-m slow`: thousands.
"""

from __future__ import annotations

import copy
import tempfile
from pathlib import Path

import numpy as np
import pytest
import yaml
from conftest import random_newick
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from mkforest.data.traits import read_traits
from mkforest.data.trees import read_trees
from mkforest.errors import InputError
from mkforest.jobs.analyses import check_config
from mkforest.starter import starting_config

FOLDER = Path(tempfile.mkdtemp(prefix="mkforest-fuzz-"))
FAST = dict(deadline=None, suppress_health_check=[HealthCheck.too_slow])
# characters that matter to the readers: tree syntax, comments, quotes, separators, numbers
ALPHABET = "(),:;[]'\"&_ \t\n\r0123456789.eE-+/|?abcRU#"


def valid_trees(seed: int, n: int = 2, tips: int = 6) -> str:
    rng = np.random.default_rng(seed)
    return "\n".join(random_newick(rng, tips) for _ in range(n)) + "\n"


NEXUS = (
    "#NEXUS\nbegin trees;\n translate\n  1 a,\n  2 'b c',\n  3 d_e\n  ;\n"
    " tree STATE_0 = [&R] ((1:0.1,2:0.2)[&prob=0.5,range={0.1,0.2}]:0.3,3:0.4);\n"
    " tree STATE_1000 = [&U] (1:0.1,2:0.2,3:0.4);\nend;\n"
)
TABLE = "taxon,colour,size\nt0,red,1\nt1,blue,2\nt2,red|blue,?\nt3,blue,3\nt4,red,1\nt5,?,2\n"


@st.composite
def mutated(draw, text: str):
    """``text`` with a few random edits: delete, insert, duplicate or replace a slice."""
    for _ in range(draw(st.integers(1, 4))):
        n = len(text)
        i = draw(st.integers(0, n))
        j = draw(st.integers(i, min(n, i + 12)))
        op = draw(st.sampled_from(["delete", "insert", "duplicate", "replace"]))
        piece = draw(st.text(alphabet=ALPHABET, min_size=1, max_size=6))
        if op == "delete":
            text = text[:i] + text[j:]
        elif op == "insert":
            text = text[:i] + piece + text[i:]
        elif op == "duplicate":
            text = text[:j] + text[i:j] + text[j:]
        else:
            text = text[:i] + piece + text[j:]
    return text


def tree_texts():
    return st.one_of(
        st.integers(0, 10_000).flatmap(lambda s: mutated(valid_trees(s))),
        mutated(NEXUS),
        st.text(alphabet=ALPHABET, max_size=80),
    )


def write(name: str, text: str) -> Path:
    path = FOLDER / name
    path.write_bytes(text.encode("utf-8", "surrogatepass"))
    return path


def ours_or_result(fn, *args, **kwargs):
    """Call fn: a result, or InputError with a sentence; anything else fails the test."""
    try:
        return fn(*args, **kwargs)
    except InputError as exc:
        text = str(exc)
        assert text.strip() and "Traceback" not in text
        return None


def check_trees(text: str) -> None:
    path = write("fuzz.tre", text)
    for kwargs in ({}, {"fast": False}, {"root": "midpoint"}, {"no_lengths": "unit"}):
        trees = ours_or_result(read_trees, path, **kwargs)
        for t in trees or []:
            assert t.n_tips >= 2 and np.all(t.length >= 0) and np.all(np.isfinite(t.length))


def check_table(text: str) -> None:
    path = write("fuzz.csv", text)
    for sep in ("|", "/"):
        traits = ours_or_result(read_traits, path, "taxon", None, separator=sep)
        for t in (traits or {}).values():
            assert t.possible.shape == (len(t.taxa), t.k)


BASE_TREES = write("base.nwk", valid_trees(1, n=2, tips=6))
BASE_TABLE = write("base.csv", TABLE)
BASE_CONFIG = {
    "run": "fuzz",
    "trees": {"file": str(BASE_TREES), "burnin": 0},
    "traits": {"file": str(BASE_TABLE), "columns": ["colour", "size"]},
    "models": {
        "one": {"kind": "equal"},
        "free": {"kind": "unconstrained", "applies_to": ["colour"], "root": "stationary"},
        "steps": {
            "kind": "custom",
            "applies_to": ["size"],
            "transitions": {"1 -> 2 -> 3": "up", "3 -> 2 -> 1": "down"},
        },
    },
    "pairs": {"both": {"traits": ["colour", "size"], "hypotheses": ["independent", "dependent"]}},
    "fitting": {"starts": 2},
}
VALUES = st.one_of(
    st.none(),
    st.booleans(),
    st.integers(-3, 10**6),
    st.floats(allow_nan=True, allow_infinity=True),
    st.text(alphabet=ALPHABET, max_size=10),
    st.sampled_from(["equal", "unit", "midpoint", "colour", "size", "one", "auto", "bootstrap"]),
    st.lists(st.text(alphabet="abcolur ", max_size=6), max_size=3),
    st.dictionaries(st.text(alphabet="abkind", max_size=5), st.integers(0, 3), max_size=2),
)


def _paths(value, prefix=()):
    """Every key path in a nested dict."""
    if isinstance(value, dict):
        for k, v in value.items():
            yield (*prefix, k)
            yield from _paths(v, (*prefix, k))


@st.composite
def configs(draw):
    config = copy.deepcopy(BASE_CONFIG)
    paths = list(_paths(config))
    for _ in range(draw(st.integers(1, 3))):
        path = draw(st.sampled_from(paths))
        holder = config
        for k in path[:-1]:
            holder = holder.get(k) if isinstance(holder, dict) else None
        if not isinstance(holder, dict):
            continue
        action = draw(st.sampled_from(["set", "delete", "add"]))
        if action == "set":
            holder[path[-1]] = draw(VALUES)
        elif action == "delete":
            holder.pop(path[-1], None)
        else:
            holder[draw(st.text(alphabet="abcdefstru_", min_size=1, max_size=8))] = draw(VALUES)
    return config


def check_one_config(config: dict) -> None:
    out = ours_or_result(check_config, config, "fuzz.yaml")
    if out is not None:
        assert isinstance(out, dict) and out["models"]
    # the same config as text: YAML that loads to anything must give a sentence too
    ours_or_result(check_config, yaml.safe_load(yaml.safe_dump(config)), "fuzz.yaml")


def check_starter(trees_text: str, table_text: str) -> None:
    trees = write("start.tre", trees_text)
    table = write("start.csv", table_text)
    ours_or_result(starting_config, trees, table, base=FOLDER)


def tables():
    return st.one_of(
        mutated(TABLE),
        mutated(TABLE.replace(",", "\t")),
        st.text(alphabet=ALPHABET + ",\t", max_size=80),
    )


# --------------------------------------------------------------------------- default suite


@settings(max_examples=150, **FAST)
@given(tree_texts())
def test_tree_text_reads_or_stops_with_our_sentence(text):
    check_trees(text)


@settings(max_examples=120, **FAST)
@given(tables())
def test_trait_table_reads_or_stops_with_our_sentence(text):
    check_table(text)


@settings(max_examples=120, **FAST)
@given(configs())
def test_config_checks_or_stops_with_our_sentences(config):
    check_one_config(config)


@settings(max_examples=40, **FAST)
@given(st.integers(0, 10_000).flatmap(lambda s: mutated(valid_trees(s, 3, 6))), tables())
def test_init_writes_a_config_or_stops_with_our_sentence(trees_text, table_text):
    check_starter(trees_text, table_text)


# --------------------------------------------------------------------------- slow suite


@pytest.mark.slow
@settings(max_examples=3000, **FAST)
@given(tree_texts())
def test_tree_text_fuzz_thousands(text):
    check_trees(text)


@pytest.mark.slow
@settings(max_examples=3000, **FAST)
@given(tables())
def test_trait_table_fuzz_thousands(text):
    check_table(text)


@pytest.mark.slow
@settings(max_examples=3000, **FAST)
@given(configs())
def test_config_fuzz_thousands(config):
    check_one_config(config)


@pytest.mark.slow
@settings(max_examples=1000, **FAST)
@given(st.integers(0, 10_000).flatmap(lambda s: mutated(valid_trees(s, 3, 6))), tables())
def test_init_fuzz_thousand(trees_text, table_text):
    check_starter(trees_text, table_text)
