"""Invented result tables in the shapes the figures read, for the figure tests.

Two data sets, both drawn from seeded generators here (no check value comes
from them; they only have to look like what users bring):

- ``demo_like()``: the demo's shape: 90 tips; five traits of 2-3 states; models
  including one reported ``same_as`` another, a custom stepwise model and an
  irreversible one; two binary trait pairs with built-in and custom hypotheses;
  some rates at the lower bound on some trees, one at the upper bound.
- ``large()``: a 300-tip tree, a 4-state trait and a 4 x 2 trait pair (eight
  joint states), with ambiguous and unknown tips.
- ``class_table()``: clades and ancestral_classes.tsv rows on any tree (hidden
  classes); ``many_state_changes()``: change counts of a trait of many states.

The rate structures come from the engine (build_model, hypothesis_model), so the
tables hold exactly the transitions the real run would.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from mkforest.data.clades import consensus_names, node_clades
from mkforest.data.traits import trait_from_mapping
from mkforest.data.trees import parse_newick
from mkforest.engine.models import build_model
from mkforest.engine.pairs import custom_hypothesis, hypothesis_model, make_pair


@dataclass
class FigureData:
    traits: dict  # name -> Trait
    models: dict  # analysis -> {model: RateModel}
    pairs: dict  # pair name -> TraitPair
    tree: object  # TreeArrays, the summary tree
    n_trees: int
    ordered: set = field(default_factory=set)
    same_as: dict = field(default_factory=dict)  # (analysis, model) -> model
    tables: dict = field(default_factory=dict)


def random_tree(rng, n_tips: int, prefix: str):
    """A random rooted tree by joining random pairs of subtrees (coalescent-like
    shape), branch lengths exponential; some near-zero internal branches."""
    nodes = [(f"{prefix}_{i:03d}", 0.0) for i in range(n_tips)]
    while len(nodes) > 1:
        i, j = sorted(rng.choice(len(nodes), 2, replace=False))
        b, a = nodes.pop(j), nodes.pop(i)
        h = max(a[1], b[1]) + rng.exponential(0.05 if rng.random() < 0.15 else 1.0)
        la, lb = h - a[1], h - b[1]
        text = f"({a[0]}:{la:.5f},{b[0]}:{lb:.5f})"
        nodes.append((text, h))
    return parse_newick(nodes[0][0] + ";", rooted=True)


def _trait(rng, name, states, taxa, p_missing=0.0, p_ambiguous=0.0):
    values = {}
    for t in taxa:
        u = rng.random()
        if u < p_missing:
            values[t] = "?"
        elif u < p_missing + p_ambiguous:
            values[t] = "|".join(rng.choice(states, 2, replace=False))
        else:
            values[t] = str(rng.choice(states))
    values[taxa[0]] = states[0]  # every state observed at least once
    for s, t in zip(states, taxa[1:]):
        values[t] = s
    return trait_from_mapping(name, values, states=states)


def _rates(rng, data: FigureData):
    rows, fits = [], []
    for analysis, named in data.models.items():
        base = {}
        for name, model in named.items():
            for tree in range(data.n_trees):
                row_fit = dict(
                    analysis=analysis,
                    model=name,
                    tree=tree,
                    same_as=data.same_as.get((analysis, name), ""),
                )
                fits.append(row_fit)
                for a, b, p in model.transitions():
                    mu = base.setdefault((name, a, b), rng.uniform(-1.5, 1.2))
                    rate, bound = float(np.exp(mu + 0.3 * rng.normal())), ""
                    if (hash((analysis, a, b)) % 3 == 0) and rng.random() < 0.3:
                        rate, bound = 1e-6, "lower"
                    if (
                        analysis == "habitat"
                        and name == "free"
                        and (a, b) == ("rock", "canopy")
                        and tree % 7 == 0
                    ):
                        rate, bound = 9000.0, "upper"
                    rows.append(
                        dict(
                            analysis=analysis,
                            model=name,
                            tree=tree,
                            from_state=a,
                            to_state=b,
                            rate=rate,
                            parameter=str(p),
                            at_bound=bound,
                        )
                    )
    fits = pd.DataFrame(fits)
    fits["weight"] = rng.dirichlet(np.ones(1), len(fits))[:, 0] * rng.random(len(fits))
    fits.loc[fits["same_as"] != "", "weight"] = np.nan
    return pd.DataFrame(rows), fits


def _support(data: FigureData, fits: pd.DataFrame):
    rows = []
    for (a, m), g in fits.groupby(["analysis", "model"], sort=False):
        rows.append(
            dict(
                analysis=a,
                model=m,
                n_trees=len(g),
                mean_weight=g["weight"].mean(),
                same_as=data.same_as.get((a, m), ""),
            )
        )
    return pd.DataFrame(rows)


def _rate_summary(rates: pd.DataFrame):
    rows = []
    for (a, m, f, t), g in rates.groupby(
        ["analysis", "model", "from_state", "to_state"], sort=False
    ):
        x = g["rate"].to_numpy(float)
        rows.append(
            dict(
                analysis=a,
                model=m,
                from_state=f,
                to_state=t,
                n_trees=len(x),
                median_rate=np.median(x),
                rate_low95=np.quantile(x, 0.025),
                rate_high95=np.quantile(x, 0.975),
            )
        )
    return pd.DataFrame(rows)


def _per_tree_changes(rng, data: FigureData):
    rows = []
    for analysis, named in data.models.items():
        states = next(iter(named.values())).states
        for tree in range(data.n_trees):
            for a, b in itertools.permutations(states, 2):
                rows.append(
                    dict(
                        analysis=analysis,
                        tree=tree,
                        from_state=a,
                        to_state=b,
                        mean_count=float(rng.gamma(2.0, 2.0)),
                    )
                )
    return pd.DataFrame(rows)


def _ancestral(rng, data: FigureData):
    tree = data.tree
    names = consensus_names(tree)
    sets = node_clades(tree)
    clades, rows = [], []
    for v in range(tree.n_tips, tree.n_nodes):
        freq = 1.0 if rng.random() < 0.6 else float(np.round(rng.uniform(0.3, 1.0), 2))
        clades.append(
            dict(
                clade=names[v],
                kind="consensus",
                n_tips=len(sets[v]),
                frequency=freq,
                n_trees_with_clade=int(freq * data.n_trees),
                key="k",
                members=",".join(sorted(sets[v])),
            )
        )
    for analysis, named in data.models.items():
        states = next(iter(named.values())).states
        for c in clades:
            p = rng.dirichlet(np.full(len(states), 0.4))
            for s, x in zip(states, p):
                rows.append(
                    dict(
                        analysis=analysis,
                        clade=c["clade"],
                        clade_kind="consensus",
                        clade_frequency=c["frequency"],
                        n_trees=data.n_trees,
                        state=s,
                        mean_probability=x,
                    )
                )
    return pd.DataFrame(rows), pd.DataFrame(clades)


def _pair_tests(rng, data: FigureData):
    tests, boot = [], []
    for name in data.pairs:
        for null, alt, df in (
            ("independent", "dependent", 4),
            ("independent", "first_depends_on_second", 2),
        ):
            if null not in data.models[name] or alt not in data.models[name]:
                continue
            for tree in range(data.n_trees):
                stat = float(rng.chisquare(df) * (2.5 if name.startswith("shell") else 1.0))
                tests.append(
                    dict(
                        pair=name,
                        null=null,
                        alternative=alt,
                        tree=tree,
                        df=df,
                        alpha=0.05,
                        statistic=stat,
                    )
                )
                if tree in (0, data.n_trees // 2, data.n_trees - 1):
                    for rep in range(99):
                        boot.append(
                            dict(
                                pair=name,
                                null=null,
                                alternative=alt,
                                tree=tree,
                                replicate=rep,
                                statistic=float(rng.chisquare(df)),
                            )
                        )
    return pd.DataFrame(tests), pd.DataFrame(boot)


def _finish(rng, data: FigureData):
    rates, fits = _rates(rng, data)
    data.tables = dict(
        rates=rates,
        fits=fits,
        model_support=_support(data, fits),
        rate_summary=_rate_summary(rates),
        transitions_per_tree=_per_tree_changes(rng, data),
    )
    states, clades = _ancestral(rng, data)
    data.tables.update(ancestral_states=states, clades=clades)
    tests, boot = _pair_tests(rng, data)
    data.tables.update(pair_tests=tests, pair_bootstrap=boot)
    return data


def _trait_models(trait, kinds):
    return {
        name: build_model(kind, trait.states, transitions, name)
        for name, (kind, transitions) in kinds.items()
    }


def _pair_models(pair, hypotheses, custom=None):
    out = {h: hypothesis_model(pair, h) for h in hypotheses}
    for name, transitions in (custom or {}).items():
        out[name] = custom_hypothesis(pair, name, transitions)
    return out


def demo_like(seed: int = 7) -> FigureData:
    rng = np.random.default_rng(seed)
    tree = random_tree(rng, 90, "Lumasta")
    taxa = list(tree.tip_labels)
    traits = {
        "habitat": _trait(rng, "habitat", ["litter", "rock", "canopy"], taxa, 0.05, 0.03),
        "size": _trait(rng, "size", ["small", "medium", "large"], taxa, 0.02),
        "banding": _trait(rng, "banding", ["banded", "plain"], taxa, 0.04),
        "aperture": _trait(rng, "aperture", ["round", "toothed"], taxa),
        "glow": _trait(rng, "glow", ["dull", "glowing"], taxa, 0.03),
    }
    basic = {
        "one_rate": ("equal", None),
        "mirrored": ("symmetric", None),
        "free": ("unconstrained", None),
    }
    models = {t: _trait_models(traits[t], basic) for t in traits}
    models["size"].update(
        _trait_models(
            traits["size"],
            {
                "stepwise": (
                    "custom",
                    {"small -> medium -> large": "grow", "large -> medium -> small": "shrink"},
                )
            },
        )
    )
    models["glow"].update(
        _trait_models(traits["glow"], {"no_regain": ("custom", {"glowing -> dull": "loss"})})
    )
    same_as = {(t, "mirrored"): "one_rate" for t in ("banding", "aperture", "glow")}
    shell = make_pair("shell_pattern", traits["banding"], traits["aperture"])
    glowb = make_pair("glow_banding", traits["glow"], traits["banding"])
    models["shell_pattern"] = _pair_models(
        shell,
        ["independent", "dependent", "first_depends_on_second"],
        {
            "toothed_first": {
                "plain+round <-> plain+toothed": "reshape",
                "banded+round <-> banded+toothed": "reshape",
                "plain+toothed -> banded+toothed": "banding_gain",
                "banded+round -> plain+round": "banding_loss",
                "banded+toothed -> plain+toothed": "banding_loss",
            }
        },
    )
    models["glow_banding"] = _pair_models(glowb, ["independent", "dependent"])
    data = FigureData(
        traits,
        models,
        {"shell_pattern": shell, "glow_banding": glowb},
        tree,
        n_trees=40,
        ordered={"size"},
        same_as=same_as,
    )
    return _finish(rng, data)


def large(seed: int = 11, n_tips: int = 300) -> FigureData:
    rng = np.random.default_rng(seed)
    tree = random_tree(rng, n_tips, "Taxon")
    taxa = list(tree.tip_labels)
    traits = {
        "substrate": _trait(
            rng, "substrate", ["sand", "mud", "gravel", "bedrock"], taxa, 0.05, 0.05
        ),
        "depth": _trait(rng, "depth", ["shallow", "mid", "deep", "abyssal"], taxa, 0.02),
        "shell": _trait(rng, "shell", ["thin", "thick"], taxa, 0.03),
    }
    basic = {
        "one_rate": ("equal", None),
        "mirrored": ("symmetric", None),
        "free": ("unconstrained", None),
    }
    models = {t: _trait_models(traits[t], basic) for t in traits}
    models["depth"].update(
        _trait_models(
            traits["depth"],
            {
                "stepwise": (
                    "custom",
                    {
                        "shallow -> mid -> deep -> abyssal": "down",
                        "abyssal -> deep -> mid -> shallow": "up",
                    },
                )
            },
        )
    )
    pair = make_pair("substrate_shell", traits["substrate"], traits["shell"])
    models["substrate_shell"] = _pair_models(
        pair, ["independent", "dependent", "first_depends_on_second", "second_depends_on_first"]
    )
    data = FigureData(
        traits,
        models,
        {"substrate_shell": pair},
        tree,
        n_trees=25,
        ordered={"depth"},
        same_as={("shell", "mirrored"): "one_rate"},
    )
    return _finish(rng, data)


def widest_pair(data: FigureData, seed: int = 5) -> dict:
    """The widest pair figures a run draws, from ``large()``'s 4 x 2 pair (eight joint
    states): its four hypotheses and a fifth with two hidden rate classes (states
    'joint@class', each class at its own rates, and switches between the classes), and
    every test among the hypotheses (six), each with a parametric bootstrap."""
    rng = np.random.default_rng(seed)
    name, pair = next(iter(data.pairs.items()))
    rates = data.tables["rates"]
    dep = rates[(rates["analysis"] == name) & (rates["model"] == "dependent")]
    extra = []
    for c in (1, 2):
        e = dep.copy()
        e["model"] = "dependent_classes"
        e["from_state"] = e["from_state"] + f"@{c}"
        e["to_state"] = e["to_state"] + f"@{c}"
        e["rate"] = e["rate"] * c
        extra.append(e)
    switch = dep.drop_duplicates(["tree", "from_state"]).copy()
    switch["model"] = "dependent_classes"
    switch["to_state"] = switch["from_state"] + "@2"
    switch["from_state"] = switch["from_state"] + "@1"
    extra.append(switch)
    models = dict(data.models[name], dependent_classes=data.models[name]["dependent"])
    hyps = list(models)
    tests, boot = [], []
    for null, alt in itertools.combinations(hyps, 2):
        for tree in range(data.n_trees):
            stat = float(rng.chisquare(2) * 2)
            tests.append(dict(pair=name, null=null, alternative=alt, tree=tree, df=2, alpha=0.05))
            tests[-1]["statistic"] = stat
            if tree in (0, data.n_trees - 1):
                boot += [
                    dict(
                        pair=name,
                        null=null,
                        alternative=alt,
                        tree=tree,
                        replicate=rep,
                        statistic=float(rng.chisquare(2)),
                    )
                    for rep in range(99)
                ]
    return dict(
        name=name,
        pair=pair,
        rates=pd.concat([rates, *extra], ignore_index=True),
        support=data.tables["model_support"],
        models=models,
        tests=pd.DataFrame(tests),
        bootstrap=pd.DataFrame(boot),
    )


def class_table(rng, tree, n_classes: int = 2, n_trees: int = 30, analysis="ink", model="two_pace"):
    """Clades of ``tree`` (as ``_ancestral``) and ancestral_classes.tsv rows of one analysis
    and model on them: per node, a row per class (``state`` empty, summing to 1) and the
    combined-state rows 'state@class' that the figure leaves to the table."""
    names, sets = consensus_names(tree), node_clades(tree)
    clades, rows = [], []
    for v in range(tree.n_tips, tree.n_nodes):
        freq = 1.0 if rng.random() < 0.6 else float(np.round(rng.uniform(0.3, 1.0), 2))
        clades.append(
            dict(
                clade=names[v],
                kind="consensus",
                n_tips=len(sets[v]),
                frequency=freq,
                n_trees_with_clade=int(freq * n_trees),
                key="k",
                members=",".join(sorted(sets[v])),
            )
        )
        p = rng.dirichlet(np.full(n_classes, 0.5))
        for cls, x in enumerate(p, start=1):
            common = dict(analysis=analysis, model=model, clade=names[v], n_trees=n_trees)
            rows.append(dict(common, state=np.nan, mean_probability=x, **{"class": cls}))
            for s, share in zip(("pale", "dark"), (0.4, 0.6)):
                rows.append(
                    dict(common, state=f"{s}@{cls}", mean_probability=x * share, **{"class": cls})
                )
    return pd.DataFrame(clades), pd.DataFrame(rows)


def many_state_changes(rng, k: int = 7, n_trees: int = 20, analysis: str = "hue"):
    """transitions_per_tree.tsv rows of one trait of k states with every rate free: all
    k(k-1) directions on every tree (42 for 7 states). Returns (rows, states)."""
    states = [f"hue{i}" for i in range(1, k + 1)]
    rows = [
        dict(
            analysis=analysis,
            tree=t,
            from_state=a,
            to_state=b,
            mean_count=float(rng.gamma(2.0, 2.0)),
        )
        for t in range(n_trees)
        for a, b in itertools.permutations(states, 2)
    ]
    return pd.DataFrame(rows), states
