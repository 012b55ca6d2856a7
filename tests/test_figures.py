"""Every figure rendered on two invented data sets and read as a reviewer would.

For each figure: no two texts overlap and no text or legend lies on the data
(matplotlib's own bounding boxes after drawing, tests/figure_checks.py); the
labels name what is drawn; PNG and SVG are written. Data sets (tests/figure_data.py):
one in the demo's shape (90 tips, 2-3 states, two binary pairs) and one with a
300-tip tree, a 4-state trait and a 4 x 2 pair. The 300-tip ancestral tree of one
trait renders in the default suite; the other trees of that set are marked slow.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from figure_checks import all_text, overlaps, size_problems
from figure_data import class_table, demo_like, large, many_state_changes, random_tree, widest_pair
from matplotlib import colormaps
from matplotlib.collections import PathCollection
from matplotlib.colors import to_hex, to_rgb

from mkforest.data.clades import tips_in_drawing_order
from mkforest.data.trees import parse_newick
from mkforest.engine.summarise import rate_summary
from mkforest.report import plots, plots_ancestral, plots_branches, plots_pairs, style


@pytest.fixture(scope="module")
def demo():
    return demo_like()


@pytest.fixture(scope="module")
def big():
    return large()


def pair_names(data):
    return {p: (pr.first.name, pr.second.name) for p, pr in data.pairs.items()}


def written(fig, tmp_path, name):
    paths = [tmp_path / f"{name}.png", tmp_path / f"{name}.svg"]
    style.save(fig, paths)
    assert paths[0].read_bytes()[:8] == b"\x89PNG\r\n\x1a\n" and paths[0].stat().st_size > 5000
    assert "<svg" in paths[1].read_text()[:1000]


# --------------------------------------------------------------------------- support and rates


@pytest.mark.parametrize("which", ["demo", "big"])
def test_support_figures(which, demo, big, tmp_path):
    data = demo if which == "demo" else big
    fig = plots.support_weights(data.tables["fits"])
    assert overlaps(fig) == [] and size_problems(fig) == []
    written(fig, tmp_path, "weights")
    fig = plots.support_heatmap(data.tables["model_support"])
    assert overlaps(fig) == [] and size_problems(fig) == []
    written(fig, tmp_path, "heatmap")


def test_support_figures_name_and_show_every_tree_set(demo):
    """With two sets: the heatmap holds each set's rows, the weights figure names its set."""
    support = demo.tables["model_support"]
    two = pd.concat([support.assign(tree_set="dated"), support.assign(tree_set="molecular")])
    fig = plots.support_heatmap(two)
    rows = [t.get_text() for t in fig.axes[0].get_yticklabels()]
    analyses = list(dict.fromkeys(support["analysis"]))
    assert rows == [f"{t} · {a}" for t in ("dated", "molecular") for a in analyses]
    assert "dated, molecular" in fig.axes[0].get_title(loc="left")
    assert overlaps(fig) == [] and size_problems(fig) == []
    fig = plots.support_weights(demo.tables["fits"], tree_set="dated")
    assert "of tree set 'dated'" in fig.get_suptitle()


def _treatment_fits():
    """fits.tsv rows: 'glow' fitted with two treatments, 'habitat' with one, two sets."""
    rng = np.random.default_rng(4)
    rows = []
    for ts in ("dated", "molecular"):
        for tree in range(12):
            for analysis, models in (
                ("glow", [("one_rate", "as_given"), ("stretched", "kappa")]),
                ("habitat", [("one_rate", "as_given"), ("free", "as_given")]),
            ):
                w = rng.dirichlet(np.ones(len(models)))
                for (m, b), wi in zip(models, w):
                    rows.append(
                        dict(
                            tree_set=ts,
                            analysis=analysis,
                            model=m,
                            tree=tree,
                            branches=b,
                            weight=wi,
                            aicc=-2 * np.log(wi),
                            log_likelihood=-30 + rng.normal(),
                        )
                    )
    return pd.DataFrame(rows)


def test_support_branches_leaves_out_single_treatment_traits_and_says_why(tmp_path):
    fig = plots_branches.support_branches(_treatment_fits())
    top, bottom = fig.axes[:2]
    rows = [t.get_text() for t in top.get_yticklabels()]
    assert rows == ["glow · as_given", "glow · kappa"]  # no all-1.0 panel for habitat
    assert "habitat: one treatment only" in top.get_title(loc="left")
    assert [t.get_text() for t in bottom.get_yticklabels()] == ["glow", "habitat"]
    assert overlaps(fig) == [] and size_problems(fig) == []
    written(fig, tmp_path, "support_branches")


@pytest.mark.parametrize("which", ["demo", "big"])
def test_rates_across_trees(which, demo, big, tmp_path):
    data = demo if which == "demo" else big
    rates, support = data.tables["rates"], data.tables["model_support"]
    fig = plots.rates_across_trees(rates, support, pair_names(data))
    assert overlaps(fig) == []
    titles = [ax.get_title(loc="left") for ax in fig.axes]
    assert titles == list(data.models)  # one panel per analysis
    for ax, analysis in zip(fig.axes, data.models):
        legend = [t.get_text() for t in ax.get_legend().get_texts()]
        repeated = {m for (a, m) in data.same_as if a == analysis}
        # a model reported same_as another is named once, not drawn again
        assert [m for m in legend if " = " not in m] == [
            m for m in data.models[analysis] if m not in repeated
        ]
        for m in repeated:
            assert f"{m} = {data.same_as[(analysis, m)]}: drawn once" in legend
        ticks = [t.get_text() for t in ax.get_xticklabels()]
        assert ticks[0] == "at lower\nbound" and ticks[-1] == "no upper\nbound"
        for t in ticks[1:-1]:  # plain numbers, never 2×10⁰
            float(t.replace(",", ""))
    # joint changes read as the trait that changes, in the other trait's state
    first, second = next(iter(pair_names(data).values()))
    pair_ax = fig.axes[list(data.models).index(next(iter(data.pairs)))]
    rows = [t.get_text() for t in pair_ax.get_yticklabels()]
    assert all(r.startswith((f"{first}: ", f"{second}: ")) for r in rows)
    assert "+" not in " ".join(rows)
    written(fig, tmp_path, "rates")
    # the workflow draws one analysis per figure: each within a page, labels at body size
    pages = plots.rate_pages(rates, support, pair_names(data))
    assert [p for p in pages if ".part" not in p] == list(data.models)
    for analysis, page in pages.items():
        assert size_problems(page) == [], analysis
        assert overlaps(page) == [], analysis


def _bound_rates(n_lower, values, bound=1e-6):
    """rates.tsv rows of one change on len(values) + n_lower trees, n_lower at the bound."""
    rows = [dict(tree=i, rate=bound, at_bound="lower") for i in range(n_lower)]
    rows += [dict(tree=n_lower + i, rate=v, at_bound="") for i, v in enumerate(values)]
    return pd.DataFrame(rows).assign(
        analysis="size", model="free", from_state="small", to_state="large"
    )


def _marker_x(fig):
    (ax,) = fig.axes
    (points,) = [c for c in ax.collections if isinstance(c, PathCollection)]
    return float(points.get_offsets()[0, 0]), ax


@pytest.mark.parametrize("n_lower", [2, 7])
def test_figure_medians_are_the_table_medians(n_lower):
    """One statistic in table and figures (rate_summary.tsv's median over the trees the
    data bound, those at the lower bound included). With 7 of 10 trees at the lower
    bound the median is the bound: the marker sits at the bound column's edge and the
    count is bold; with 2 of 10, the marker is at the table's median."""
    rates = _bound_rates(n_lower, np.linspace(0.4, 0.9, 10 - n_lower))
    table = rate_summary(rates).iloc[0]
    fig = plots.rates_across_trees(rates)
    x, ax = _marker_x(fig)
    (count,) = [t for t in ax.texts if t.get_text() == f"{n_lower}/10"]
    if n_lower == 7:
        assert table["median_rate"] == 1e-6  # the bound is the headline ...
        first_tick = ax.get_xticks()[1]
        assert x < first_tick and x > ax.get_xticks()[0]  # ... drawn at the column's edge
        assert count.get_fontweight() == "bold"
    else:
        assert x == pytest.approx(np.log10(table["median_rate"]))
        assert count.get_fontweight() == "normal"
    assert overlaps(fig) == []
    # the pair figures take the same numbers (style.rate_intervals)
    stats = style.rate_intervals(rates).iloc[0]
    assert stats["median"] == table["median_rate"] and stats["low"] == table["rate_low95"]


def test_rates_at_a_bound_are_counted_not_drawn(demo):
    """Trees with a rate at the bound appear as 'k/n' counts at the axis ends; the
    interval is drawn from the other trees only (so 1e-6 never stretches the axis)."""
    rates = demo.tables["rates"]
    one = rates[(rates["analysis"] == "habitat") & (rates["model"] == "free")]
    fig = plots.rates_across_trees(one, None)
    stats = style.rate_intervals(one)
    counts = {t.get_text() for t in fig.axes[0].texts}
    expected = {f"{n}/{m}" for n, m in zip(stats["n_lower"], stats["n_trees"]) if n} | {
        f"{n}/{m}" for n, m in zip(stats["n_upper"], stats["n_trees"]) if n
    }
    assert expected and counts == expected
    lo, hi = fig.axes[0].get_xlim()
    free = one[one["at_bound"] == ""]["rate"]
    assert 10**lo > 1e-4 and 10**lo < free.min()  # the axis starts near the estimates
    assert 10**hi < 9000  # the upper-bound rate is not a value


def test_rate_text_and_ticks():
    assert style.rate_text(8.4e-07) == "< 0.001"
    assert style.rate_text(0.0123) == "0.012"
    assert style.rate_text(2.345) == "2.35"
    assert style.rate_text(1234.5) == "1,234"
    assert style.log_ticks(0.05, 30) == [0.05, 0.1, 0.2, 0.5, 1, 2, 5, 10, 20]
    assert [style.plain_number(x) for x in (0.001, 0.5, 2.0, 1000.0)] == [
        "0.001",
        "0.5",
        "2",
        "1,000",
    ]


def test_changes_read_in_state_order():
    """Rows follow the declared state order, not the alphabet; a pair's changes of one
    trait sit next to each other across the other trait's states."""
    keys = [("canopy", "litter"), ("litter", "rock"), ("rock", "canopy"), ("litter", "canopy")]
    assert style.ordered_changes(keys, None, ["litter", "rock", "canopy"]) == [
        ("litter", "rock"),
        ("litter", "canopy"),
        ("rock", "canopy"),
        ("canopy", "litter"),
    ]
    joint = ["plain+round", "plain+toothed", "banded+round", "banded+toothed"]
    keys = [
        ("plain+round", "plain+toothed"),
        ("banded+toothed", "plain+toothed"),
        ("plain+round", "banded+round"),
    ]
    assert style.ordered_changes(keys, ("banding", "aperture"), joint) == [
        ("plain+round", "banded+round"),
        ("banded+toothed", "plain+toothed"),
        ("plain+round", "plain+toothed"),
    ]


def test_palettes_are_the_colour_blind_safe_ones():
    """Okabe & Ito (2008) as recommended by Wong (2011, Nature Methods 8:441, Fig. 2):
    the seven colours besides black (hex values from memory of the published table);
    cividis from matplotlib (Nuñez et al. 2018)."""
    published = {"#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7"}
    assert {c.upper() for c in style.categorical(7)} == published
    assert len(set(style.categorical(12))) == 12
    ramp = style.ordered(4)
    assert len(set(ramp)) == 4 and ramp[0] == to_hex(colormaps["viridis"](0.0))


def _lab(hex_colour):
    """CIE 1976 L*a*b* of an sRGB colour (D65 white; the sRGB and CIELAB formulas of
    IEC 61966-2-1 and CIE 15, from memory)."""
    c = np.array(to_rgb(hex_colour))
    c = np.where(c <= 0.04045, c / 12.92, ((c + 0.055) / 1.055) ** 2.4)
    m = np.array([[0.4124, 0.3576, 0.1805], [0.2126, 0.7152, 0.0722], [0.0193, 0.1192, 0.9505]])
    xyz = m @ c / np.array([0.95047, 1.0, 1.08883])
    f = np.where(xyz > 216 / 24389, np.cbrt(xyz), (24389 / 27 * xyz + 16) / 116)
    return np.array([116 * f[1] - 16, 500 * (f[0] - f[1]), 200 * (f[1] - f[2])])


def test_ordered_states_are_told_apart():
    """Five ordered states (a count 0-4): neighbouring colours at least 25 CIE76 units
    apart (a just-noticeable difference is about 2.3, Sharma 2003, from memory; small tip
    marks need far more: 25 is our own margin). cividis gave 18."""
    lab = [_lab(c) for c in style.ordered(5)]
    steps = [np.linalg.norm(b - a) for a, b in zip(lab, lab[1:])]
    assert min(steps) >= 25, steps
    assert lab[-1][0] < 90  # the lightest still shows on white


# --------------------------------------------------------------------------- pairs


@pytest.mark.parametrize("which", ["demo", "big"])
def test_pair_figures(which, demo, big, tmp_path):
    data = demo if which == "demo" else big
    name, pair = next(iter(data.pairs.items()))
    rates, support = data.tables["rates"], data.tables["model_support"]
    fig = plots_pairs.rates_by_state(pair, rates, support, data.models[name])
    assert overlaps(fig) == []
    assert [ax.get_title(loc="left") for ax in fig.axes] == [
        f"changes in {pair.first.name}",
        f"changes in {pair.second.name}",
    ]
    rows = [t.get_text() for t in fig.axes[0].get_yticklabels()]
    # every change of the first trait, once in each state of the second
    assert len(rows) == pair.k1 * (pair.k1 - 1) * pair.k2
    assert rows[0] == (
        f"{pair.first.states[0]} → {pair.first.states[1]}  "
        f"({pair.second.name} {pair.second.states[0]})"
    )
    legend = " ".join(t.get_text() for t in fig.legends[0].get_texts())
    assert f"changes in {pair.first.name} depend on {pair.second.name}" in legend
    assert "first_depends_on_second:" in legend
    written(fig, tmp_path, "by_state")

    fig = plots_pairs.joint_rate_grid(pair, rates, support, data.models[name])
    assert overlaps(fig) == []
    texts = all_text(fig)
    assert not any("e-0" in t for t in texts)  # never 8.4e-07
    hatched = [p for ax in fig.axes for p in ax.patches if p.get_hatch()]
    k = len(pair.states)
    doubles = sum(
        1
        for i in range(k)
        for j in range(k)
        if all(a != b for a, b in zip(pair.split(i), pair.split(j)))
    )
    shown = [h for h in data.models[name] if h not in {m for (a, m) in data.same_as if a == name}]
    assert len(hatched) == doubles * len(shown)  # every double change marked
    written(fig, tmp_path, "grid")


def test_pair_grid_writes_tiny_rates_as_below_precision(demo):
    name, pair = next(iter(demo.pairs.items()))
    rates = demo.tables["rates"].copy()
    sel = (rates["analysis"] == name) & (rates["model"] == "dependent")
    rates.loc[sel, "rate"] = 8.4e-07
    fig = plots_pairs.joint_rate_grid(pair, rates, None, demo.models[name])
    texts = all_text(fig)
    assert any(t.startswith("< 0.001") for t in texts)
    assert not any("8.4" in t for t in texts)


def test_pair_tests_figure(demo, tmp_path):
    fig = plots_pairs.pair_tests_figure(
        "shell_pattern", demo.tables["pair_tests"], demo.tables["pair_bootstrap"]
    )
    assert overlaps(fig) == [] and size_problems(fig) == []
    labels = [ax.get_xlabel() for ax in fig.axes]
    assert "likelihood-ratio statistic 2 × (ln L alternative − ln L null)" in labels
    written(fig, tmp_path, "tests")
    # no bootstrap: one column, and the title says why
    fig = plots_pairs.pair_tests_figure("shell_pattern", demo.tables["pair_tests"], pd.DataFrame())
    n_tests = demo.tables["pair_tests"].query("pair == 'shell_pattern'")[["null", "alternative"]]
    assert len(fig.axes) == len(n_tests.drop_duplicates())
    assert "no parametric bootstrap" in fig.get_suptitle()
    assert overlaps(fig) == [] and size_problems(fig) == []


@pytest.fixture(scope="module")
def widest(big):
    return widest_pair(big)


@pytest.mark.slow
def test_pair_grid_pages_fit_a_page_at_the_widest(widest, tmp_path):
    """Eight joint states, five hypotheses, one with two hidden classes: every grid on a
    page of style.PAGE with its text at the body size, every series drawn once, and the
    cells carry the medians of rate_summary (style.rate_intervals)."""
    w = widest
    pages = plots_pairs.joint_rate_pages(w["pair"], w["rates"], w["support"], w["models"])
    assert len(pages) > 1 and list(pages)[1] == f"{w['name']}.part2"
    titles = []
    for name, fig in pages.items():
        assert size_problems(fig) == [] and overlaps(fig) == [], name
        titles += [ax.get_title().split("\n")[0] for ax in fig.axes if ax.get_title()]
    series = ["dependent_classes, class 1", "dependent_classes, class 2"]
    assert titles == [h for h in w["models"] if h != "dependent_classes"] + series
    # the colour scale is one across pages
    bars = [fig.axes[-1].get_ylim() for fig in pages.values()]
    assert all(b == bars[0] for b in bars)
    written(next(iter(pages.values())), tmp_path, "grid_page")


def test_pair_grid_cells_say_the_table_medians_and_bound_counts(widest):
    w = widest
    # class 1 of the hidden-class hypothesis, as its page draws it
    fig = plots_pairs.joint_rate_grid(
        w["pair"], w["rates"], w["support"], w["models"], ["dependent_classes, class 1"], (5, 6)
    )
    assert size_problems(fig) == [] and overlaps(fig) == []
    mine = w["rates"][(w["rates"]["model"] == "dependent_classes")]
    mine = mine[mine["from_state"].str.endswith("@1") & mine["to_state"].str.endswith("@1")]
    row = mine[(mine["from_state"] == mine["from_state"].iloc[0])]
    row = row[row["to_state"] == row["to_state"].iloc[0]]
    stats = style.rate_intervals(row.assign(model="x"))
    expected = style.rate_text(float(stats["median"].iloc[0]))
    n_bound = int((row["at_bound"] != "").sum())
    i = list(w["pair"].states).index(row["from_state"].iloc[0][:-2])
    j = list(w["pair"].states).index(row["to_state"].iloc[0][:-2])
    cell = [t.get_text() for t in fig.axes[0].texts if t.get_position() == (j, i)]
    assert cell == [expected + (f"\n{n_bound}/{row['tree'].nunique()}" if n_bound else "")]


def test_pair_rates_by_state_pages_fit_a_page_at_the_widest(widest, tmp_path):
    w = widest
    pages = plots_pairs.rates_by_state_pages(w["pair"], w["rates"], w["support"], w["models"])
    assert len(pages) > 1
    rows = []
    for name, fig in pages.items():
        assert size_problems(fig) == [] and overlaps(fig) == [], name
        rows += [t.get_text() for ax in fig.axes for t in ax.get_yticklabels()]
    pair = w["pair"]
    # every change of each trait in each state of the other, once, in order
    assert (
        len(rows)
        == len(set(rows))
        == pair.k1 * (pair.k1 - 1) * pair.k2 + pair.k2 * (pair.k2 - 1) * pair.k1
    )
    assert "page 2 of" in pages[f"{w['name']}.part2"].get_suptitle()
    written(pages[f"{w['name']}.part2"], tmp_path, "by_state_page")


@pytest.mark.slow
def test_pair_test_pages_fit_a_page_at_the_widest(widest, tmp_path):
    w = widest
    pages = plots_pairs.pair_test_pages(w["name"], w["tests"], w["bootstrap"])
    keys = []
    for name, fig in pages.items():
        assert size_problems(fig) == [] and overlaps(fig) == [], name
        keys += [" ".join(ax.get_title().split("\n")[:-1]) for ax in fig.axes[::2]]
    assert len(keys) == len(set(keys)) == 10 and len(pages) == 4  # five hypotheses
    written(pages[f"{w['name']}.part2"], tmp_path, "tests_page")


# --------------------------------------------------------------------------- ancestral


@pytest.mark.parametrize("which", ["demo", "big"])
def test_changes(which, demo, big, tmp_path):
    data = demo if which == "demo" else big
    per_tree = data.tables["transitions_per_tree"]
    fig = plots_ancestral.change_counts(per_tree, pair_names(data))
    assert overlaps(fig) == []
    name, pair = next(iter(data.pairs.items()))
    ax = fig.axes[list(data.models).index(name)]
    rows = [t.get_text() for t in ax.get_yticklabels()]
    n_single = len(pair.states) * (pair.k1 - 1 + pair.k2 - 1)
    assert len(rows) == n_single  # no double changes drawn
    assert [p for p in size_problems(fig) if not p.startswith("figure")] == []
    written(fig, tmp_path, "changes")


@pytest.mark.parametrize("which", ["demo", "big"])
def test_change_pages_fit_a_page_whatever_the_number_of_traits(which, demo, big):
    """Five copies of the single traits (a run of many traits): every page within a
    journal page, 8-point text, nothing overlapping; every analysis on exactly one page,
    in order (the 4 x 2 pair's 32 directions split over two panels), its panels' rows
    together those of change_counts alone."""
    data = demo if which == "demo" else big
    per_tree = data.tables["transitions_per_tree"]
    pairs = pair_names(data)
    single = per_tree[~per_tree["analysis"].isin(pairs)]
    many = pd.concat(
        [per_tree] + [single.assign(analysis=single["analysis"] + f"_{i}") for i in range(4)]
    )
    pages = plots_ancestral.change_pages(many, pairs)
    assert len(pages) > 1 and list(pages)[:2] == ["changes", "changes.part2"]
    drawn = {}
    for name, fig in pages.items():
        assert overlaps(fig) == [] and size_problems(fig) == [], name
        for ax in fig.axes:
            a = ax.get_title(loc="left").split(" (")[0]
            drawn.setdefault(a, []).extend(t.get_text() for t in ax.get_yticklabels())
    assert list(drawn) == list(dict.fromkeys(many["analysis"]))
    for a, rows in drawn.items():
        alone = plots_ancestral.change_counts(many[many["analysis"] == a], pairs).axes[0]
        assert rows == [t.get_text() for t in alone.get_yticklabels()], a
    n_panels = sum(len(f.axes) for f in pages.values())
    assert n_panels == len(drawn) + (which == "big")  # substrate_shell: 32 > CHANGE_MAX_ROWS


def test_changes_title_says_why_trees_are_missing(demo):
    """Trees whose every map was drawn under a fit the data do not bound have no count
    (transitions_per_tree.tsv mean_count empty): the title says how many and why."""
    per_tree = demo.tables["transitions_per_tree"]
    one = per_tree[per_tree["analysis"] == "habitat"].copy()
    gone = one["tree"].isin(sorted(set(one["tree"]))[:3])
    one.loc[gone, "mean_count"] = np.nan
    fig = plots_ancestral.change_counts(one)
    title = fig.axes[0].get_title(loc="left")
    n = one["tree"].nunique()
    assert title.startswith(f"habitat ({n - 3} trees)")
    assert f"3 of {n} trees left out" in title and "the data do not bound" in title
    assert overlaps(fig) == [] and size_problems(fig) == []


def _tree(data, analysis):
    trait = data.traits.get(analysis) or data.pairs[analysis].joint_trait()
    states = data.tables["ancestral_states"]
    ordered = plots_ancestral.is_ordered_trait(data.models[analysis].values(), trait.k)
    pages = plots_ancestral.state_tree_pages(
        data.tree,
        states[states["analysis"] == analysis],
        data.tables["clades"],
        trait,
        analysis,
        ordered,
        rooting="at the midpoint of the longest path",
    )
    return pages, ordered


def _check_tree(pages, data, analysis):
    """Every page fits a journal page with 8-point text and no overlap; each tip is on
    exactly one page, in drawing order, in contiguous blocks; every node bar is on a page."""
    labels, shown = [], set()
    for name, fig in pages.items():
        assert overlaps(fig) == [] and size_problems(fig) == [], name
        ax = fig.axes[0]
        tips = [t for t in ax.texts if t.get_text() in data.tree.tip_labels]
        labels += [t.get_text() for t in sorted(tips, key=lambda t: t.get_position()[1])]
        shown |= fig.mkforest_nodes_shown
    order = [data.tree.tip_labels[v] for v in tips_in_drawing_order(data.tree)]
    assert labels == order  # every tip once, pages top to bottom
    first = pages[""]
    n_internal = data.tree.n_nodes - data.tree.n_tips
    # nearly every node carries its bar; any left out are counted in the legend
    assert len(shown) == first.mkforest_nodes_drawn
    assert first.mkforest_nodes_drawn + first.mkforest_bars_left_out == n_internal
    assert first.mkforest_bars_left_out <= 0.05 * n_internal
    legend = [t.get_text() for t in first.axes[0].get_legend().get_texts()]
    if first.mkforest_bars_left_out:
        assert any(
            t.startswith(f"{first.mkforest_bars_left_out} node bars left out") for t in legend
        )
    return legend


@pytest.mark.parametrize("analysis", ["habitat", "size", "shell_pattern"])
def test_ancestral_trees_demo(analysis, demo, tmp_path):
    pages, ordered = _tree(demo, analysis)
    legend = _check_tree(pages, demo, analysis)
    assert ordered == (analysis == "size")  # stepwise model: ordered states
    if analysis in demo.pairs:
        pair = demo.pairs[analysis]
        assert {s.replace("+", " + ") for s in pair.states} <= set(legend)
        tip_marks = [
            p
            for fig in pages.values()
            for p in fig.axes[0].patches
            if p.get_x() > demo.tree.depths().max()
        ]
        assert len(tip_marks) >= demo.tree.n_tips  # pair trees show tip states
    else:
        assert "tip: state unknown" in legend  # both traits have unknown cells
    if analysis == "habitat":  # and habitat ambiguous ones
        assert "tip: several states possible" in legend
    written(pages[""], tmp_path, f"tree_{analysis}")


def test_ancestral_tree_300_tips(big, tmp_path):
    """300 tips, 4 states: cut into pages within a journal page (was one figure of 60
    inches), 8-point labels, nothing overlaps, each page a block of tips."""
    pages, ordered = _tree(big, "substrate")
    assert not ordered
    _check_tree(pages, big, "substrate")
    assert len(pages) == 10  # 30 tips a page
    assert list(pages)[1:3] == [".part2", ".part3"]
    titles = [f.axes[0].get_title(loc="left") for f in pages.values()]
    assert "tips 1-30 of 300" in titles[0] and "tips 271-300 of 300" in titles[-1]
    written(pages[".part2"], tmp_path, "tree_substrate")


def test_a_tree_that_fits_is_one_page(demo):
    """A tree of few tips is one page, without a page line in its title."""
    tree = parse_newick("((a:1,b:1):1,(c:1.5,d:0.5):0.5);")
    assert plots_ancestral.page_rows(tree, 3) == [(0, 4)]
    assert plots_ancestral.page_rows(demo.tree, 3) == [(0, 30), (30, 60), (60, 90)]


@pytest.mark.slow
@pytest.mark.parametrize("analysis", ["depth", "shell", "substrate_shell"])
def test_ancestral_trees_300_tips_others(analysis, big, tmp_path):
    pages, ordered = _tree(big, analysis)
    assert ordered == (analysis == "depth")
    _check_tree(pages, big, analysis)
    written(pages[""], tmp_path, f"tree_{analysis}")


def _check_class_pages(pages, tree):
    """Every page of a class tree within a journal page (8-point text, nothing
    overlapping), naming the table of its values; every tip on exactly one page, in
    drawing order; page names "", ".part2", ..."""
    labels = []
    for name, fig in pages.items():
        assert size_problems(fig) == [] and overlaps(fig) == [], name
        ax = fig.axes[0]
        assert plots_ancestral.CLASS_TABLE in ax.get_legend().get_title().get_text()
        tips = [t for t in ax.texts if t.get_text() in tree.tip_labels]
        labels += [t.get_text() for t in sorted(tips, key=lambda t: t.get_position()[1])]
    assert labels == [tree.tip_labels[v] for v in tips_in_drawing_order(tree)]
    assert list(pages) == [""] + [f".part{i}" for i in range(2, len(pages) + 1)]


def test_class_tree_pages_fit_a_page(tmp_path):
    """A 90-tip class tree (was one figure about 20 inches tall) in pages within a
    journal page; the legend names tables/ancestral_classes.tsv."""
    rng = np.random.default_rng(21)
    tree = random_tree(rng, 90, "Vell")
    clades, classes = class_table(rng, tree, n_classes=3)
    pages = plots_ancestral.class_tree_pages(
        tree, classes, clades, "ink", "two_pace", rooting="at the midpoint of the longest path"
    )
    assert len(pages) == 3
    _check_class_pages(pages, tree)
    titles = [f.axes[0].get_title(loc="left") for f in pages.values()]
    assert "under model 'two_pace'" in titles[0] and "tips 61-90 of 90" in titles[-1]
    # each page carries only the branches that reach it (its SVG does not hold the whole
    # tree): the first collection drawn is the branches
    whole = (tree.n_nodes - 1) + (tree.n_nodes - tree.n_tips)
    for fig in pages.values():
        assert 0 < len(fig.axes[0].collections[0].get_segments()) < 0.6 * whole
    written(pages[".part2"], tmp_path, "class_tree")


def test_tree_pages_are_drawn_one_at_a_time():
    """The plot job saves and closes each page before the next is drawn, so a tree of
    many tips holds one figure open, not one per page (a 1000-tip tree's 34 pages tripped
    Matplotlib's warning of more than 20 open figures). Same pages as the dict form."""
    import matplotlib.pyplot as plt

    rng = np.random.default_rng(21)
    tree = random_tree(rng, 90, "Vell")
    clades, classes = class_table(rng, tree, n_classes=3)
    plt.close("all")
    names, most_open = [], 0
    for name, fig in plots_ancestral.iter_class_tree_pages(
        tree, classes, clades, "ink", "two_pace"
    ):
        most_open = max(most_open, len(plt.get_fignums()))
        names.append(name)
        plt.close(fig)
    assert names == ["", ".part2", ".part3"] and most_open == 1
    pages = plots_ancestral.class_tree_pages(tree, classes, clades, "ink", "two_pace")
    assert list(pages) == names and len(plt.get_fignums()) == 3
    plt.close("all")


def test_class_tree_pages_on_polytomies_and_zero_length_branches():
    """Polytomies of three and four, zero-length branches, tips of unequal depth (not a
    time tree): still paged within a journal page, every tip once. (A tree without
    lengths stops at reading, data.trees.)"""
    blocks = [
        "(A{0}a:1,A{0}b:0.5,A{0}c:2):1"
        if i % 2
        else "((A{0}a:1,A{0}b:1):0,A{0}c:1,A{0}d:0,A{0}e:3):0"
        for i in range(12)
    ]
    tree = parse_newick(
        "(" + ",".join(b.format(i) for i, b in enumerate(blocks)) + ");", rooted=True
    )
    rng = np.random.default_rng(3)
    clades, classes = class_table(rng, tree)
    pages = plots_ancestral.class_tree_pages(tree, classes, clades, "ink", "two_pace")
    assert len(pages) == 2 and tree.n_tips == 48
    _check_class_pages(pages, tree)


@pytest.mark.slow
def test_class_tree_250_tips(tmp_path):
    """250 tips (was one figure of 6.8 x 52.5 inches): nine pages, each within a journal
    page, every tip on exactly one."""
    rng = np.random.default_rng(8)
    tree = random_tree(rng, 250, "Orrin")
    clades, classes = class_table(rng, tree)
    pages = plots_ancestral.class_tree_pages(tree, classes, clades, "ink", "two_pace")
    assert len(pages) == 9
    _check_class_pages(pages, tree)
    written(pages[".part9"], tmp_path, "class_tree_250")


def test_changes_of_seven_states_split_over_pages():
    """7 states with every rate free (42 directions, was one page of 7.1 x 11.8 inches):
    panels of at most CHANGE_MAX_ROWS rows, every page within a journal page; every
    direction drawn exactly once, in the order of a single panel; the panels of one
    trait on one scale and each saying which directions it holds."""
    rng = np.random.default_rng(5)
    per_tree, states = many_state_changes(rng)
    pages = plots_ancestral.change_pages(per_tree, {}, {"hue": states})
    assert list(pages) == ["changes", "changes.part2"]
    drawn, limits = [], []
    for name, fig in pages.items():
        assert overlaps(fig) == [] and size_problems(fig) == [], name
        for ax in fig.axes:
            title = ax.get_title(loc="left")
            if title.startswith("hue ("):
                rows = [t.get_text() for t in ax.get_yticklabels()]
                assert len(rows) <= plots_ancestral.CHANGE_MAX_ROWS
                assert f"directions {len(drawn) + 1}-{len(drawn) + len(rows)} of 42" in title
                drawn += rows
                limits.append(ax.get_xlim())
    one = plots_ancestral.change_counts(per_tree, states={"hue": states}).axes[0]
    assert drawn == [t.get_text() for t in one.get_yticklabels()] and len(drawn) == 42
    assert len(limits) == 2 and limits[0] == limits[1]
    assert plots_ancestral.change_panels({"hue": 42, "x": 30, "y": 61}) == [
        ("hue", 0, 21, 42),
        ("hue", 21, 42, 42),
        ("x", 0, 30, 30),
        ("y", 0, 20, 61),
        ("y", 20, 41, 61),
        ("y", 41, 61, 61),
    ]


def test_a_figure_of_one_set_among_several_names_it(demo):
    """Figures drawn from the first of several tree sets say which set they show."""
    per_tree = demo.tables["transitions_per_tree"]
    two = pd.concat([per_tree.assign(tree_set="dated"), per_tree.assign(tree_set="molecular")])
    assert style.set_named(two) == "dated" and style.set_named(per_tree) == ""
    fig = plots_ancestral.change_counts(per_tree)
    style.name_tree_set(fig, style.set_named(two))
    assert fig.get_suptitle().endswith("(tree set 'dated')")
    fig = plots_pairs.pair_tests_figure("shell_pattern", demo.tables["pair_tests"], pd.DataFrame())
    style.name_tree_set(fig, "dated")
    assert "(tree set 'dated')" in fig.get_suptitle()
    assert overlaps(fig) == []
