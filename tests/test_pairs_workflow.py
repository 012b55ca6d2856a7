"""Trait pairs in the real workflow: a Snakemake run on a tiny generated data set.

Checks the pair's rows in the standard tables, the tests recomputed from the
fits (statistic 2 (ln L_alt - ln L_null); chi-square p-value from
scipy.stats.chi2, general-purpose reference library; degrees of freedom from
the parameter counts, Pagel 1994), the bootstrap p-value recomputed from the
simulated statistics ((1 + #{T* >= T}) / (N + 1), common practice), that the
bootstrap does not depend on the chunking, and that the figures are written
and carry their labels.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from figure_checks import overlaps
from scipy.stats import chi2
from workflow_helpers import run_snakemake, tiny_config

from mkforest.data.traits import trait_from_mapping, traits_from_json
from mkforest.engine import pairs
from mkforest.errors import InputError
from mkforest.jobs.pairs import bootstrap_tree_indices
from mkforest.report.plots_pairs import joint_rate_grid, pair_tests_figure, rates_by_state

ROUND_FIRST = {
    "plain+round <-> banded+round": "band",
    "plain+round <-> plain+toothed": "tooth",
    "banded+round -> banded+toothed": "tooth",
}
PAIR_SPEC = {
    "traits": ["banding", "aperture"],
    "hypotheses": ["independent", "dependent"],
    "custom": {"round_first": {"transitions": ROUND_FIRST}},
    "bootstrap": 5,
    "bootstrap_trees": 2,
}


def pair_config(work, per_job=2):
    return tiny_config(
        work,
        trees={"file": str(work / "data" / "trees.nex"), "burnin": 1, "per_job": per_job},
        traits={
            "file": str(work / "data" / "traits.tsv"),
            "taxon_column": "taxon",
            "columns": ["banding", "aperture"],
        },
        models={"one_rate": {"kind": "equal"}},
        pairs={"shell": PAIR_SPEC},
    )


@pytest.fixture(scope="module")
def pair_run(tmp_path_factory):
    work = tmp_path_factory.mktemp("pairs")
    cfg = pair_config(work)
    proc = run_snakemake(work, cfg)
    assert proc.returncode == 0, proc.stderr[-4000:]
    out = work / "results" / "tiny"
    tables = {
        n: pd.read_csv(out / "tables" / f"{n}.tsv", sep="\t")
        for n in (
            "fits",
            "rates",
            "pair_tests",
            "pair_summary",
            "pair_bootstrap",
            "trees_used",
            "rate_summary",
            "model_support",
        )
    }
    return work, out, tables


def test_pair_fits_and_rates_in_the_standard_tables(pair_run):
    _, _, t = pair_run
    fits = t["fits"][t["fits"]["analysis"] == "shell"]
    assert set(fits["model"]) == {"independent", "dependent", "round_first"}
    assert fits.groupby("model")["n_params"].first().to_dict() == {
        "independent": 4,
        "dependent": 8,
        "round_first": 2,
    }  # Pagel 1994: 4 and 8
    rates = t["rates"][t["rates"]["analysis"] == "shell"]
    joint = {"plain+round", "plain+toothed", "banded+round", "banded+toothed"}
    assert set(rates["from_state"]) <= joint and set(rates["to_state"]) <= joint
    # no change of both traits at once is ever listed as a transition (Pagel 1994)
    for f, to in zip(rates["from_state"], rates["to_state"]):
        a, b = f.split("+"), to.split("+")
        assert (a[0] == b[0]) != (a[1] == b[1])


def test_tests_recomputed_from_the_fits(pair_run):
    _, _, t = pair_run
    tests, fits = t["pair_tests"], t["fits"]
    assert set(zip(tests["null"], tests["alternative"])) == {
        ("independent", "dependent"),
        ("round_first", "dependent"),
    }
    ll = fits[fits["analysis"] == "shell"].set_index(["model", "tree"])
    for row in tests.to_dict("records"):
        n, a = ll.loc[(row["null"], row["tree"])], ll.loc[(row["alternative"], row["tree"])]
        stat = max(0.0, 2 * (a["log_likelihood"] - n["log_likelihood"]))
        assert row["statistic"] == pytest.approx(stat, rel=1e-5, abs=1e-6)
        assert row["df"] == a["n_params"] - n["n_params"]
        assert row["p_chi2"] == pytest.approx(chi2.sf(row["statistic"], row["df"]), rel=1e-4)
        assert row["reject_chi2"] == (row["p_chi2"] <= 0.05)
    for row in tests.to_dict("records"):
        at_lower = ll.loc[(row["null"], row["tree"]), "at_lower"]
        flagged = isinstance(at_lower, str) and at_lower != ""
        assert row["null_rate_at_lower_bound"] == flagged
        if flagged and row["n_bootstrap"] > 0:
            # a rate at the lower bound is always simulated from its interval edge
            assert set(at_lower.split(",")) <= set(row["bootstrap_rates_moved"].split(","))
            assert "at the edge of its 95% interval" in row["note"]
    boundary = tests.groupby(["null", "alternative"])["boundary"].first().to_dict()
    assert boundary == {("independent", "dependent"): False, ("round_first", "dependent"): True}
    assert tests.loc[tests["boundary"], "note"].str.contains("approximate").all()


def test_bootstrap_p_values_and_tree_choice(pair_run):
    _, _, t = pair_run
    tests, boot, used = t["pair_tests"], t["pair_bootstrap"], t["trees_used"]
    chosen = bootstrap_tree_indices(used["tree"].tolist(), 2)
    assert chosen == [used["tree"].iloc[0], used["tree"].iloc[-1]]
    assert set(boot["tree"]) == set(chosen)
    with_boot = tests[tests["n_bootstrap"] > 0]
    assert set(with_boot["tree"]) == set(chosen)
    assert (with_boot["n_bootstrap"] == 5).all()
    assert tests.loc[tests["n_bootstrap"] == 0, "p_bootstrap"].isna().all()
    for row in with_boot.to_dict("records"):
        sims = boot[
            (boot["null"] == row["null"])
            & (boot["alternative"] == row["alternative"])
            & (boot["tree"] == row["tree"])
        ]["statistic"].to_numpy()
        assert sorted(
            boot[(boot["tree"] == row["tree"]) & (boot["null"] == row["null"])][
                "replicate"
            ].unique()
        ) == list(range(5))
        expected = (1 + np.sum(sims >= row["statistic"] - 1e-6 * abs(row["statistic"]))) / 6
        assert row["p_bootstrap"] == pytest.approx(expected)
    assert (boot["statistic"] >= 0).all()


def test_summary_across_trees(pair_run):
    _, _, t = pair_run
    tests, summary = t["pair_tests"], t["pair_summary"]
    for row in summary.to_dict("records"):
        g = tests[(tests["null"] == row["null"]) & (tests["alternative"] == row["alternative"])]
        assert row["n_trees"] == len(g) == 5
        assert row["fraction_reject_chi2"] == pytest.approx(g["reject_chi2"].mean())
        assert row["median_statistic"] == pytest.approx(g["statistic"].median(), rel=1e-5)
        assert row["critical_chi2"] == pytest.approx(chi2.isf(0.05, row["df"]), rel=1e-5)
        assert row["n_trees_bootstrap"] == 2
        assert "only 5 trees" in row["caution"]
        assert "5 bootstrap data sets per tree" in row["caution"]


def test_bootstrap_does_not_depend_on_chunking(pair_run, tmp_path):
    """Same seed, one chunk of five trees instead of chunks of two: identical statistics."""
    work, _, t = pair_run
    (tmp_path / "data").symlink_to(work / "data")
    cfg = pair_config(tmp_path, per_job=5)
    proc = run_snakemake(tmp_path, cfg, "results/tiny/tables/pair_bootstrap.tsv")
    assert proc.returncode == 0, proc.stderr[-4000:]
    again = pd.read_csv(tmp_path / "results/tiny/tables/pair_bootstrap.tsv", sep="\t")
    assert (tmp_path / "results/tiny/pairs/shell/bootstrap/chunk_0000.tsv").exists()
    key = ["null", "alternative", "tree", "replicate"]
    a = t["pair_bootstrap"].sort_values(key).reset_index(drop=True)
    b = again.sort_values(key).reset_index(drop=True)
    assert not (tmp_path / "results/tiny/pairs/shell/bootstrap/chunk_0001.tsv").exists()
    pd.testing.assert_frame_equal(a[key + ["statistic"]], b[key + ["statistic"]])


def test_pair_plots_written_with_their_labels(pair_run):
    work, out, t = pair_run
    for kind in ("rates_by_state", "joint_rates", "tests"):
        # one folder per kind of figure, one figure per pair (pages of a big one)
        folder = out / "plots" / "pairs" / kind
        pages = ["shell", "shell.part2"] if kind == "joint_rates" else ["shell"]  # 2 grids a page
        assert sorted(p.name for p in folder.glob("[!.]*")) == sorted(
            f"{page}.{ext}" for page in pages for ext in ("png", "svg")
        )
        png, svg = folder / "shell.png", folder / "shell.svg"
        assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n" and png.stat().st_size > 10_000
        assert svg.read_text().lstrip().startswith("<?xml") and svg.stat().st_size > 10_000
    # the same figures rebuilt from the run's tables: their texts name what they show
    traits = traits_from_json(json.loads((out / "prepared" / "traits.json").read_text()))
    pair = pairs.make_pair("shell", traits["banding"], traits["aperture"])
    models = {h: m for h, (m, _) in pairs.pair_models("shell", PAIR_SPEC, pair).items()}
    fig = rates_by_state(pair, t["rates"], t["model_support"], models)
    assert overlaps(fig) == []
    ticks = {x.get_text() for ax in fig.axes for x in ax.get_yticklabels()}
    assert "plain → banded  (aperture toothed)" in ticks
    assert "round → toothed  (banding plain)" in ticks
    legend = " ".join(x.get_text() for x in fig.legends[0].get_texts())
    assert "independent: banding and aperture change independently" in legend
    assert "'round_first' (custom" in legend
    fig = joint_rate_grid(pair, t["rates"], t["model_support"], models)
    assert overlaps(fig) == []
    titles = " ".join(ax.get_title() for ax in fig.axes)
    for h in ("independent", "dependent", "round_first"):
        assert h in titles
    assert "both traits at once: never allowed" in {
        x.get_text() for x in fig.legends[0].get_texts()
    }
    fig = pair_tests_figure("shell", t["pair_tests"], t["pair_bootstrap"])
    assert overlaps(fig) == []
    titles = " ".join(ax.get_title() for ax in fig.axes)
    assert "independent vs dependent" in titles and "parametric bootstrap" in titles
    labels = {ax.get_xlabel() for ax in fig.axes}
    assert any("likelihood-ratio statistic" in x for x in labels)
    legend_texts = {
        x.get_text() for ax in fig.axes if ax.get_legend() for x in ax.get_legend().get_texts()
    }
    assert any(x.startswith("χ² 95% point, df 4") for x in legend_texts)
    assert any(x.startswith("simulated under independent") for x in legend_texts)


def test_untestable_pair_is_refused_early():
    """A listed test whose null is not nested in its alternative: InputError naming the key."""
    traits = {
        "banding": trait_from_mapping("banding", {"a": "plain", "b": "banded"}),
        "aperture": trait_from_mapping("aperture", {"a": "round", "b": "toothed"}),
    }
    spec = {
        "traits": ["banding", "aperture"],
        "hypotheses": ["independent", "dependent"],
        "tests": [["dependent", "independent"]],
    }
    with pytest.raises(
        InputError,
        match=r"pairs.shell.tests: \[dependent, independent\] cannot "
        r"be tested: 'dependent' is not nested in 'independent'",
    ):
        pairs.pair_analysis("shell", spec, traits)
    spec["tests"] = [["independent", "linked"]]
    with pytest.raises(InputError, match=r"names hypothesis 'linked'"):
        pairs.pair_analysis("shell", spec, traits)


def test_test_rows_and_summary_from_hand_made_tables():
    """pair_test_rows / summary_rows on tables written here: statistic 2 (ln L_alt - ln L_null)
    floored at 0, chi-square p from scipy.stats.chi2 (general-purpose library), bootstrap p
    (1 + #{T* >= T}) / (N + 1) (common practice), and the plain-words flags."""
    from mkforest.engine.pairs import Nesting
    from mkforest.jobs.pairs import TEST_COLUMNS, pair_test_rows, summary_rows

    fits = pd.DataFrame(
        [
            # tree 0: an ordinary fit; tree 1: the null has a rate at the lower bound;
            # tree 2: the alternative's optimiser fell short of its own null
            dict(
                analysis="shell",
                model="independent",
                tree=0,
                n_params=4,
                log_likelihood=-60.0,
                converged=True,
                at_lower="",
                weight=0.2,
            ),
            dict(
                analysis="shell",
                model="dependent",
                tree=0,
                n_params=8,
                log_likelihood=-54.0,
                converged=True,
                at_lower="",
                weight=0.8,
            ),
            dict(
                analysis="shell",
                model="independent",
                tree=1,
                n_params=4,
                log_likelihood=-50.0,
                converged=True,
                at_lower="banding: plain->banded",
                weight=0.9,
            ),
            dict(
                analysis="shell",
                model="dependent",
                tree=1,
                n_params=8,
                log_likelihood=-49.0,
                converged=False,
                at_lower="",
                weight=0.1,
            ),
            dict(
                analysis="shell",
                model="independent",
                tree=2,
                n_params=4,
                log_likelihood=-40.0,
                converged=True,
                at_lower="",
                weight=0.95,
            ),
            dict(
                analysis="shell",
                model="dependent",
                tree=2,
                n_params=8,
                log_likelihood=-40.5,
                converged=True,
                at_lower="",
                weight=0.05,
            ),
        ]
    )
    boot = pd.DataFrame(
        [
            dict(
                pair="shell",
                null="independent",
                alternative="dependent",
                tree=t,
                replicate=r,
                statistic=s,
                null_rates_moved=moved,
            )
            for t, sims, moved in (
                (0, [1.0, 13.0, 2.0, 12.0], ""),
                (1, [0.5, 0.1, 3.0, 0.0], "banding: plain->banded"),
            )
            for r, s in enumerate(sims)
        ]
    )
    test = Nesting("independent", "dependent", 4, False)
    rows = {r["tree"]: r for r in pair_test_rows("shell", [test], fits, boot, 0.05)}
    assert rows[0]["statistic"] == pytest.approx(12.0)
    assert rows[0]["p_chi2"] == pytest.approx(chi2.sf(12.0, 4))
    assert rows[0]["p_bootstrap"] == pytest.approx((1 + 2) / 5)  # 13 and 12 are >= 12
    assert rows[0]["reject_chi2"] and not rows[0]["reject_bootstrap"] and rows[0]["note"] == ""
    assert rows[1]["statistic"] == pytest.approx(2.0)
    assert rows[1]["p_bootstrap"] == pytest.approx((1 + 1) / 5)
    assert rows[1]["null_rate_at_lower_bound"]
    assert rows[1]["bootstrap_rates_moved"] == "banding: plain->banded"
    assert (
        "simulated banding: plain->banded at the edge of its 95% interval" in rows[1]["note"]
        and "banding: plain->banded at it" in rows[1]["note"]
    )
    assert "fit of dependent not converged" in rows[1]["note"]
    assert rows[2]["statistic"] == 0.0 and "missed the maximum" in rows[2]["note"]
    assert np.isnan(rows[2]["p_bootstrap"]) and rows[2]["n_bootstrap"] == 0
    summary = summary_rows(pd.DataFrame(list(rows.values()), columns=TEST_COLUMNS), fits, 4)
    (s,) = summary
    assert s["n_trees"] == 3 and s["n_trees_bootstrap"] == 2
    assert s["fraction_reject_chi2"] == pytest.approx(1 / 3)
    assert s["fraction_reject_bootstrap"] == 0.0
    assert s["median_statistic"] == pytest.approx(2.0)
    assert s["null_mean_weight"] == pytest.approx((0.2 + 0.9 + 0.95) / 3)
    assert s["n_bootstrap_null_at_bound"] == 1
    assert "1 of 2 bootstrapped trees" in s["caution"] and "only 3 trees" in s["caution"]
    assert "smallest possible bootstrap p-value is 0.2" in s["caution"]
