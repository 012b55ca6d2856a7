"""The methods text's words for branch-length treatments and tree sets (issue: kappa was
described word for word as the equal-rates model, and a second tree set's result was in
no sentence). Words only: the numbers are read from the tables given, checked against
them here."""

from __future__ import annotations

import pandas as pd

from mkforest.engine.models import build_model
from mkforest.report import methods
from mkforest.report.methods_branches import (
    other_sets_lines,
    rate_unit_words,
    tree_sets_brief,
)
from mkforest.report.words import model_words

STATES = ("dull", "glowing")
CONFIG = {  # as the schema fills it (every model has branches)
    "models": {
        "one_rate": {"kind": "equal", "branches": "as_given"},
        "per_event": {"kind": "equal", "branches": "unit"},
        "stretched": {"kind": "equal", "branches": "kappa"},
        "flat": {"kind": "equal", "branches": {"kappa": 0}},
    },
}
MODELS = {"glow": {n: (build_model("equal", STATES, name=n), "uniform") for n in CONFIG["models"]}}


def test_each_model_is_described_by_its_structure_and_its_treatment():
    words = dict(zip(CONFIG["models"], methods.quoted_models(CONFIG, MODELS)))
    assert len(set(words.values())) == 4  # no two models read alike
    assert "branch lengths as given" in words["one_rate"]
    assert "every branch of length one" in words["per_event"]
    assert "kappa, estimated on each tree" in words["stretched"]
    assert "kappa fixed at 0" in words["flat"]
    structure = model_words(MODELS["glow"]["one_rate"][0])  # the same for all four
    assert all(structure in w for w in words.values())
    # every model on the given lengths: no treatment words at all
    plain = {"models": {"one_rate": {"kind": "equal", "branches": "as_given"}}}
    (only,) = methods.quoted_models(plain, {"glow": {"one_rate": MODELS["glow"]["one_rate"]}})
    assert only == f'"one_rate" ({structure})'


def test_a_long_paragraph_keeps_each_models_treatment_by_name():
    """Over 250 words the paragraph lists models by name: with the treatment beside each."""
    from mkforest.report.methods.brief import treatment_names

    assert treatment_names(CONFIG, MODELS) == (
        '"one_rate" (lengths as given), "per_event" (unit lengths), "stretched" '
        '(kappa estimated) and "flat" (kappa 0)'
    )


def test_rates_are_given_in_the_unit_of_their_treatment():
    assert rate_unit_words("as_given") == "changes per unit branch length"
    assert "every branch of length one" in rate_unit_words("unit")
    assert "transformed by kappa" in rate_unit_words("kappa=0")


def test_tree_sets_in_one_sentence_and_every_sets_result():
    sets = {"dated": {"file": "a.nex"}, "molecular": {"file": "b.nex"}}
    used = pd.DataFrame({"tree_set": ["dated"] * 3 + ["molecular"] * 4, "tree": range(7)})
    sentence = tree_sets_brief(sets, used)
    assert sentence.count(". ") == 0 and sentence.strip().endswith(".")
    assert "tree set 'molecular' (4 trees)" in sentence and "'dated'" in sentence
    assert tree_sets_brief({"dated": {}}, used) == ""
    support = pd.DataFrame(
        [
            ("dated", "glow", "one_rate", 3, 0.7, 2 / 3),
            ("dated", "glow", "stretched", 3, 0.3, 1 / 3),
            ("molecular", "glow", "one_rate", 4, 0.01, 0.0),
            ("molecular", "glow", "stretched", 4, 0.99, 1.0),
        ],
        columns=["tree_set", "analysis", "model", "n_trees", "mean_weight", "fraction_best"],
    )
    (line,) = other_sets_lines("glow", support, "AICc")
    assert line.startswith("On tree set 'molecular' (4 trees), stretched received the most")
    assert "mean Akaike weight 0.99; lowest AICc on 4 of 4 trees" in line
    assert other_sets_lines("glow", support[support["tree_set"] == "dated"], "AICc") == []


def test_pair_hypotheses_are_worded_in_one_place():
    """Each built-in pair hypothesis's words live in report/words.HYPOTHESIS_WORDS; the
    methods models section and the scan paragraph say the same thing (they used to keep
    their own wordings, and the scan's 'dependent' differed from the models section's)."""
    from pathlib import Path

    from mkforest.engine.models import HYPOTHESES
    from mkforest.report.methods_scan import scan_paragraph
    from mkforest.report.words import HYPOTHESIS_WORDS, hypothesis_structure

    assert set(HYPOTHESIS_WORDS) == set(HYPOTHESES)
    report = Path(methods.__file__).parents[1]
    holders = [
        p.relative_to(report).as_posix()
        for p in report.rglob("*.py")
        if "depend on the state of" in p.read_text() and p.name != "words.py"
    ]
    assert holders == [], f"pair hypotheses worded outside words.py, in {holders}"
    config = {
        "scan": {
            "alternatives": ["dependent", "first_depends_on_second"],
            "joint_states": 4,
            "traits": "all",
            "level": 0.05,
            "hidden_classes": 1,
        }
    }
    text = scan_paragraph(config, pd.DataFrame({"trait_1": ["a"], "trait_2": ["b"]}))
    for alt in config["scan"]["alternatives"]:
        assert hypothesis_structure(alt, "the first trait", "the second") in text
