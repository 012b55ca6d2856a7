"""End-to-end: a real Snakemake run with hidden rate classes on a tiny generated data set.

Checks against facts of the trade: class probabilities at a clade sum to one, and
the combined-state probabilities of a class sum to that class's probability; the
observed-state probabilities still sum to one; independent-with-classes nests in
dependent-with-classes with 2 x 4 = 8 extra rates for two binary traits (Pagel 1994,
per class).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from workflow_helpers import run_snakemake, tiny_config

pytestmark = pytest.mark.slow  # one real workflow run with ancestral states and pairs, ~2-5 min


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    work = tmp_path_factory.mktemp("hidden")
    tiny_config(work)  # writes the data
    cfg = tiny_config(
        work,
        traits={
            "file": str(work / "data" / "traits.tsv"),
            "taxon_column": "taxon",
            "columns": ["glow", "banding", "aperture"],
        },
        models={
            "one_rate": {"kind": "equal"},
            "two_speed": {
                "kind": "unconstrained",
                "hidden_classes": 2,
                "root": "dull",
                "applies_to": ["glow"],
            },
        },
        pairs={
            "shells": {
                "traits": ["banding", "aperture"],
                "hidden_classes": 2,
                "hypotheses": ["independent", "dependent"],
            }
        },
        ancestral={"enabled": True, "model": "average", "maps": 5},
    )
    proc = run_snakemake(work, cfg, timeout=1500)
    assert proc.returncode == 0, proc.stderr[-3000:]
    return work / "results" / "tiny"


def read(out, name):
    return pd.read_csv(
        out / "tables" / f"{name}.tsv",
        sep="\t",
        dtype={"state": str, "from_state": str, "to_state": str},
    )


def test_fits_and_rates_carry_classes(run):
    fits = read(run, "fits")
    two = fits[fits["model"] == "two_speed"]
    assert set(two["analysis"]) == {"glow"} and (two["n_params"] == 5).all()
    pair = fits[fits["analysis"] == "shells"].groupby("model")["n_params"].first()
    assert pair.to_dict() == {"dependent": 17, "independent": 9}
    rates = read(run, "rates")
    r = rates[rates["model"] == "two_speed"]
    assert {"dull@1", "dull@2", "glowing@1", "glowing@2"} == set(r["from_state"])
    # class 1 is the slower class on every tree: mean rate of leaving a state within it
    within = r[r["from_state"].str[-1] == r["to_state"].str[-1]]
    within = within[within["from_state"].str[:-2] != within["to_state"].str[:-2]]
    mean = within.groupby(["tree", within["from_state"].str[-1]])["rate"].mean().unstack()
    assert (mean["1"] <= mean["2"]).all()
    tests = read(run, "pair_tests")
    assert (tests["df"] == 8).all()


def test_ancestral_classes_add_up(run):
    classes = read(run, "ancestral_classes")
    assert set(zip(classes["analysis"], classes["model"])) == {
        ("glow", "two_speed"),
        ("shells", "independent"),
        ("shells", "dependent"),
    }
    c = classes[classes["n_trees"] > 0]
    whole = c[c["state"].isna()]
    combined = c[c["state"].notna()]
    per_clade = whole.groupby(["analysis", "model", "clade"])["mean_probability"].sum()
    np.testing.assert_allclose(per_clade.to_numpy(), 1.0, atol=1e-6)
    by_class = combined.groupby(["analysis", "model", "clade", "class"])["mean_probability"].sum()
    cls = whole.set_index(["analysis", "model", "clade", "class"])["mean_probability"]
    np.testing.assert_allclose(
        by_class.sort_index().to_numpy(), cls.sort_index().to_numpy(), atol=1e-6
    )
    states = read(run, "ancestral_states")
    sums = states.groupby(["analysis", "clade"])["mean_probability"].sum()
    np.testing.assert_allclose(sums.dropna().to_numpy(), 1.0, atol=1e-6)
    assert not states["state"].str.contains("@").any()


def test_class_figures_and_methods(run):
    # one folder of class trees, a page per tree of this size, PNG and SVG (and Snakemake's
    # hidden timestamp of a folder output)
    folder = run / "plots" / "class_trees"
    pages = sorted(p.name for p in folder.iterdir() if not p.name.startswith("."))
    assert pages == [
        f"{a}_{m}.{ext}"
        for a, m in (("glow", "two_speed"), ("shells", "dependent"), ("shells", "independent"))
        for ext in ("png", "svg")
    ]
    for name in ("glow_two_speed", "shells_independent"):
        png = run / "plots" / "class_trees" / f"{name}.png"
        assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n" and png.stat().st_size > 5000
    text = (run / "methods.md").read_text()
    assert "hidden rate classes" in text
    assert "Beaulieu, O'Meara & Donoghue 2013" in text
    assert "Maddison & FitzJohn 2015" in text


def test_pair_figures_one_series_per_class(run):
    """With hidden classes each hypothesis is drawn once per class (changes within a
    class): a grid per hypothesis and class, a series per hypothesis and class."""
    import json

    from figure_checks import overlaps

    from mkforest.data.traits import traits_from_json
    from mkforest.engine import pairs
    from mkforest.report.plots_pairs import joint_rate_grid, rates_by_state

    traits = traits_from_json(json.loads((run / "prepared" / "traits.json").read_text()))
    pair = pairs.make_pair("shells", traits["banding"], traits["aperture"])
    rates, support = read(run, "rates"), read(run, "model_support")
    fig = joint_rate_grid(pair, rates, support)
    assert overlaps(fig) == []
    titles = [ax.get_title().split("\n")[0] for ax in fig.axes if ax.get_visible()]
    for h in ("independent", "dependent"):
        assert f"{h}, class 1" in titles and f"{h}, class 2" in titles
    ticks = {x.get_text() for ax in fig.axes for x in ax.get_yticklabels()}
    assert {s.replace("+", " + ") for s in pair.states} <= ticks
    fig = rates_by_state(pair, rates, support)
    assert overlaps(fig) == []
    legend = [x.get_text() for x in fig.legends[0].get_texts()]
    for h in ("independent", "dependent"):
        for c in (1, 2):
            assert any(t.startswith(f"{h}, class {c}: ") for t in legend)
