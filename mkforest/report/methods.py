"""A methods and results text for a manuscript, written from one run's settings and tables.

Every number in the text is read from the run's tables and rounded; every
setting from the resolved config. Published methods are cited in the text and
listed in full at the end (mkforest.report.citations). Stages that did not run (trait
pairs, ancestral states) are mentioned only when their tables are given.

``methods_text(config, tables, models, software)``:
  tables   {name: DataFrame}: model_support, fits, trees_used, data_check and
           rate_summary are needed; pair_summary, ancestral_states, transitions
           and clades are used when present
  models   {analysis: {model name: (RateModel, root)}} as built for the fits
  software {package: version}, from mkforest.report.provenance.software_versions()
"""

from __future__ import annotations

import math
from pathlib import Path

import pandas as pd

from ..data.config import tree_sets
from ..engine.models import HYPOTHESES, KIND_TABLE
from ..engine.search import AGREE_TOL, RATE_STARTS, SAME_F, SAME_X
from ..engine.summarise import as_text
from ..jobs.analyses import hidden_classes
from .citations import REFERENCES, cite, cited_in
from .methods_bayes import bayes_paragraph, bayes_results, bayes_warnings
from .methods_branches import branches_paragraph, first_set, results_lines, tree_sets_paragraph
from .methods_scan import scan_methods_lines, scan_results
from .words import hypothesis_words, model_words

CRITERION_NAMES = {"aicc": "AICc", "aic": "AIC", "bic": "BIC"}
CRITERION_REFS = {
    "aicc": ("akaike1974", "hurvich1989"),
    "aic": ("akaike1974",),
    "bic": ("schwarz1978",),
}


# --------------------------------------------------------------------------- numbers as words


def number(x, digits: int = 2) -> str:
    """Rounded for the text; 'n/a' when missing, '<0.01' rather than a misleading 0.00."""
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return "n/a"
    x = float(x)
    if x != 0 and abs(x) < 0.5 * 10**-digits:
        return f"<{10**-digits:.{digits}f}" if x > 0 else f"-<{10**-digits:.{digits}f}"
    return f"{x:.{digits}f}"


def p_value(p) -> str:
    if p is None or not math.isfinite(float(p)):
        return "n/a"
    return "<0.001" if p < 0.001 else f"{p:.3f}"


def count_of(fraction, n: int) -> int:
    """Trees behind a fraction of n trees (fractions in the tables are k / n)."""
    return int(round(float(fraction) * n)) if n else 0


def plural(n: int, word: str, many: str | None = None) -> str:
    return f"{n} {word if n == 1 else (many or word + 's')}"


def listing(items) -> str:
    items = list(items)
    if len(items) <= 2:
        return " and ".join(items)
    return ", ".join(items[:-1]) + " and " + items[-1]


def _how_often(k: int, n: int) -> str:
    if n == 0:
        return "on no tree (no tree could be fitted)"
    if k == n:
        return "on every tree" if n > 1 else "on the single tree"
    if k == 0:
        return "on no tree"
    share = k / n
    if share >= 0.9:
        return "on nearly every tree"
    if share > 0.5:
        return "on most trees"
    return "on fewer than half of the trees, so the ranking depends on the tree"


# --------------------------------------------------------------------------- model structures


def describe_model(model, pair_traits=None) -> str:
    """Plain-words structure of one candidate model, with its number of rates."""
    if pair_traits and model.kind in HYPOTHESES:
        first, second = pair_traits
        words = {
            "independent": f"{first} and {second} each change at their own rates, whatever the "
            "state of the other",
            "dependent": f"the rates of {first} depend on the state of {second} and vice versa",
            "first_depends_on_second": f"the rates of {first} depend on the state of {second}; "
            f"those of {second} do not",
            "second_depends_on_first": f"the rates of {second} depend on the state of {first}; "
            f"those of {first} do not",
        }[model.kind]
    elif model.kind in KIND_TABLE and KIND_TABLE[model.kind].words:
        words = KIND_TABLE[model.kind].words
    elif model.n_classes > 1:
        words = f"only the changes listed are allowed ({_first_class(model)})"
    else:
        words = f"only the changes listed are allowed ({model.describe()})"
    if model.n_classes > 1:
        switch = KIND_TABLE[model.class_switch].switch_words
        words += (
            f", in each of {model.n_classes} hidden rate classes, each with rates of its own; "
            f"lineages switch class without changing state ({switch}) "
            + cite("beaulieu2013", "tuffley1998", "galtier2001")
        )
    return f"{words} ({plural(model.n_params, 'rate')})"


def _first_class(model) -> str:
    """describe() of a hidden-class model's first class, without the class marks: every
    class has the same structure."""
    parts = []
    for part in model.describe().split("; "):
        label, _, body = part.partition(": ")
        if label.endswith("@1"):
            parts.append(f"{label[:-2]}: {body.replace('@1', '')}")
        elif label == "fixed":
            parts.append(
                "fixed: "
                + ", ".join(
                    x.replace("@1", "") for x in body.split(", ") if "@1" in x.split("=")[0]
                )
            )
    return "; ".join(parts)


def root_words(root: str) -> str:
    return {
        "uniform": "every state equally probable at the root",
        "stationary": "the root states at the model's stationary distribution",
        "data_weighted": "each root state weighted by its conditional likelihood "
        + cite("fitzjohn2009"),
    }.get(root, f"the root fixed in state '{root}'")


# --------------------------------------------------------------------------- paragraphs


def _data_paragraph(config, tables) -> str:
    check = tables["data_check"]
    used = tables["trees_used"]
    parts, missing, ambiguous = [], False, False
    for trait in config["traits"]["columns"]:
        rows = check[check["trait"] == trait].set_index("item")["value"]
        states = [i.split(":", 1)[1] for i in rows.index if str(i).startswith("state:")]
        scored = int(sum(int(rows[f"state:{s}"]) for s in states) + int(rows.get("ambiguous", 0)))
        extra = []
        if int(rows.get("ambiguous", 0)):
            extra.append(f"{int(rows['ambiguous'])} of them ambiguous")
            ambiguous = True
        if int(rows.get("missing", 0)):
            missing = True
        detail = f"; {', '.join(extra)}" if extra else ""
        parts.append(
            f"{trait} ({len(states)} states: {', '.join(states)}; scored for {scored} taxa{detail})"
        )
    n_tips = int(used["n_tips"].iloc[0])
    text = (
        f"We analysed {plural(len(parts), 'categorical trait')} of {n_tips} taxa: {listing(parts)}."
    )
    only = check[check["item"] == "taxa_in_table_only"]
    if len(only) and int(only["value"].max()) > 0:
        row = only.sort_values("value").iloc[-1]
        names = [x for x in str(row["detail"]).split(",") if x]
        shown = listing(names[:10]) + (f" and {len(names) - 10} more" if len(names) > 10 else "")
        text += (
            f" {plural(int(row['value']), 'taxon', 'taxa')} of the trait table "
            f"{'is' if int(row['value']) == 1 else 'are'} in none of the trees and "
            f"{'was' if int(row['value']) == 1 else 'were'} not analysed ({shown}; "
            "tables/data_check.tsv)."
        )
    if missing:
        text += " Cells scored as unknown were treated as compatible with every state."
    if ambiguous:
        text += " Ambiguous cells were treated as compatible with each of their listed states."
    return text


def _trees_paragraph(config, tables) -> str:
    tcfg = next(iter(tree_sets(config).values()))
    used = first_set(tables["trees_used"])
    positions = sorted(int(t) for t in used["tree"])
    n = len(positions)
    name = Path(tcfg["file"]).name
    if n == 1:
        return (
            f"Every model was fitted on one tree, the tree at position {positions[0]} "
            f"(counted from 0) of {name}; phylogenetic uncertainty was not taken into account."
            + _rooting_sentence(tcfg)
        )
    steps = []
    burnin = tcfg["burnin"]
    counts = _tree_counts(tables)
    dropped = counts.get("dropped_as_burnin")
    in_file = counts.get("trees_in_file")
    if dropped is None:  # a run from before these counts were recorded
        dropped = positions[0] if burnin else 0
    of_file = f" of the {in_file} in the file" if in_file is not None else " in the file"
    if dropped == 0:
        steps.append(
            "no trees were discarded as burn-in"
            if burnin == 0
            else f"the burn-in setting ({burnin:g}) discarded none of the trees"
        )
    elif burnin < 1:
        steps.append(
            f"the first {dropped} trees{of_file} ({burnin * 100:g}%) were discarded as burn-in"
            if dropped > 1
            else f"the first tree{of_file} ({burnin * 100:g}%) was discarded as burn-in"
        )
    else:
        steps.append(
            f"the first tree{of_file} was discarded as burn-in"
            if dropped == 1
            else f"the first {dropped} trees{of_file} were discarded as burn-in"
        )
    if tcfg["thin"] > 1:
        steps.append(f"every {_ordinal(tcfg['thin'])} tree was kept")
    regular = all(b - a == tcfg["thin"] for a, b in zip(positions, positions[1:]))
    if tcfg.get("sample") is not None and not regular:
        steps.append(f"{n} trees were drawn at random from those left (seed {config['seed']})")
    span = (
        f"positions {positions[0]} to {positions[-1]}"
        if regular and tcfg["thin"] == 1
        else f"{n} positions from {positions[0]} to {positions[-1]}"
    )
    return (
        f"To take phylogenetic uncertainty into account, every model was fitted separately on "
        f"each of {n} {sample_words(tcfg, 'in')} {name}: {listing(steps)}. The trees used "
        f"are listed in tables/trees_used.tsv by their position in the file ({span}, counted "
        "from 0)." + _rooting_sentence(tcfg) + _branch_sentence(tcfg, tables, n)
    )


def sample_words(tcfg, where: str = "") -> str:
    """What the trees are (trees.kind), in the words of a methods text: 'trees of a
    posterior sample', 'bootstrap trees' or 'trees'; with ``where``, the words before
    the file name ('trees from the tree sample in', 'bootstrap trees in')."""
    kind = tcfg.get("kind", "posterior")
    if kind == "posterior":
        return "trees from the tree sample in" if where else "trees of a posterior sample"
    words = "bootstrap trees" if kind == "bootstrap" else "trees"
    return f"{words} {where}" if where else words


def _tree_counts(tables) -> dict:
    """{item: value} of the tree rows of data_check.tsv (trait '(trees)'), when present."""
    check = tables.get("data_check")
    if check is None or "trait" not in check:
        return {}
    rows = check[(check["trait"] == "(trees)") & (check["item"] != "zero_length_tips")]
    return {r["item"]: int(r["value"]) for r in rows.to_dict("records")}


def _branch_sentence(tcfg, tables, n) -> str:
    """Zero-length branches as read, the minimum length applied, and the trees on which
    tips at distance zero make a trait impossible: counted from data_check.tsv."""
    check = tables.get("data_check")
    if check is None or "item" not in check:
        return ""
    text = ""
    per_tree = check[check["item"] == "zero_length_tips"]
    if len(per_tree):
        text += (
            f" {len(per_tree)} of the {n} trees had tips on branches of length zero "
            f"({int(per_tree['value'].sum())} such tips in all; named per tree in "
            "tables/data_check.tsv)."
        )
    counts = _tree_counts(tables)
    if counts.get("trees_without_lengths"):
        text += (
            f" {plural(counts['trees_without_lengths'], 'tree')} had no branch lengths in the "
            "file; every branch was given one unit of length (change per speciation event)."
        )
    minimum = tcfg.get("min_branch_length") or 0
    if minimum:
        text += (
            f" Branches shorter than {minimum:g} were lengthened to {minimum:g} before "
            f"fitting ({plural(counts.get('branches_lengthened', 0), 'branch', 'branches')} "
            "in all)."
        )
    bad = check[check["item"] == "impossible_zero_length_tips"]
    for trait, g in bad.groupby("trait", sort=False):
        k = g["tree"].nunique()
        text += (
            f" On {k} of the {n} trees, tips joined by zero-length branches differ in "
            f"{trait}, which no model allows (likelihood zero); those trees were left out "
            f"of the comparison of {trait}'s models."
        )
    return text


def _rooting_sentence(tcfg) -> str:
    root = tcfg.get("root")
    if root is None:
        return ""
    if root == "midpoint":
        return (
            " The trees were rooted at the midpoint of their longest tip-to-tip path before "
            "fitting."
        )
    out = root["outgroup"]
    return (
        f" The trees were rooted on the {'outgroup' if len(out) > 1 else 'outgroup taxon'} "
        f"{listing(out)}, with the root placed halfway along the branch that separates "
        f"{'it' if len(out) == 1 else 'them'} from the other taxa."
    )


def _ordinal(n: int) -> str:
    suffix = "th" if 10 <= n % 100 <= 20 else {1: "st", 2: "nd", 3: "rd"}.get(n % 10, "th")
    return f"{n}{suffix}"


def _models_paragraph(config, models, support) -> str:
    pairs = config.get("pairs", {})
    lines = []
    roots = {}
    for analysis, named in models.items():
        pair_traits = tuple(pairs[analysis]["traits"]) if analysis in pairs else None
        label = (
            f"the pair {pair_traits[0]} × {pair_traits[1]} ({analysis})"
            if pair_traits
            else analysis
        )
        described = [f"{name}, {describe_model(m, pair_traits)}" for name, (m, _) in named.items()]
        lines.append(f"for {label}: {'; '.join(described)}")
        for name, (_, root) in named.items():
            who = roots.setdefault(root, [])
            if name not in who:  # roots are set per model, whatever the trait
                who.append(name)
    text = (
        "Each trait was modelled as a continuous-time Markov chain on its states (the Mk "
        f"model; {REFERENCES['lewis2001'].cite()}), and likelihoods were computed with the "
        f"pruning algorithm {cite('felsenstein1981')}. The candidate models were, "
        + "; ".join(lines)
        + "."
    )
    if len(roots) == 1:
        text += f" Every model was fitted with {root_words(next(iter(roots)))}."
    else:
        text += (
            " Root treatment: "
            + "; ".join(f"{root_words(r)} for {listing(who)}" for r, who in roots.items())
            + "."
        )
    if "same_as" in support:
        same = support[as_text(support["same_as"]) != ""]
        for row in same.to_dict("records"):
            text += (
                f" For {row['analysis']}, {row['model']} has the same rate structure and root "
                f"as {row['same_as']}; it is the same hypothesis and was left out of the "
                "weights."
            )
    return text


def _fitting_paragraph(config, software) -> str:
    fit = config["fitting"]
    starts = fit["starts"]
    most = max(fit.get("max_starts", starts), starts)
    scipy_version = software.get("scipy", "")
    if most > starts:
        begun = (
            f"from at least {plural(starts, 'starting point')} per tree and model (and at "
            f"least as many as the model has free rates, up to {RATE_STARTS}), tried in a "
            "fixed seeded order, with further starts (at most "
            f"{most} in all) while the two best disagreed by more than {AGREE_TOL:g} "
            "log-likelihood units"
        )
    else:
        begun = f"from {plural(starts, 'starting point')} per tree and model"
    text = (
        "Rates were estimated by maximum likelihood, on a log scale, with the L-BFGS-B "
        f"algorithm {cite('byrd1995')} of SciPy {scipy_version}, {begun}. "
        "Each rate was bounded between "
        f"{fit['lower']:g} and {fit['upper']:g} expected changes along the tree's root-to-tip "
        "height, so the bounds scale with each tree; estimates at a bound are flagged in "
        "tables/rates.tsv. A rate at the upper bound, or whose 95% likelihood interval "
        "reaches it, is one the data do not bound from above: it is never reported as an "
        "estimate (at the bound, as at least the bound) and is left out of medians, "
        "intervals and averages, with the number of trees where it occurred beside them."
    )
    if most > 1:
        text += (
            f" A fit counted as converged when at least two starts reached the best "
            f"log-likelihood within {AGREE_TOL:g} units. A start that came within "
            f"{SAME_X:g} of an earlier start's optimum in every parameter as the "
            "optimiser sees it (log-rates; a branch-length parameter in its own step "
            f"unit), and within {SAME_F:g} units of its log-likelihood, was stopped "
            "there as having reached it."
        )
    else:
        text += " With a single start per fit, convergence could not be checked."
    return text


def _comparison_paragraph(config) -> str:
    crit = config["criterion"]
    name = CRITERION_NAMES[crit]
    return (
        f"On each tree, the models of each trait were ranked by {name} "
        f"{cite(*CRITERION_REFS[crit])}, with the number of taxa scored as the sample size, and "
        f"{name} differences were converted to Akaike weights {cite('burnham2002')}. Support "
        "across the tree sample is given as the mean Akaike weight over trees and the number "
        f"of trees on which a model had the lowest {name}; the {name} difference to the best "
        "model is summarised by its median and central 95% interval across trees. Rates were "
        "also averaged over models with each tree's Akaike weights."
    )


def _pairs_paragraph(config, pair_summary) -> str:
    pairs = config["pairs"]
    described = [f"{p} ({spec['traits'][0]} × {spec['traits'][1]})" for p, spec in pairs.items()]
    text = (
        f"For the trait {'pair' if len(pairs) == 1 else 'pairs'} {listing(described)}, the two "
        "traits were combined into one Markov chain on their joint states in which only one "
        f"trait changes at a time {cite('pagel1994')}, and the hypotheses listed above were "
        "fitted on every tree like the models of single traits. Nested hypotheses were "
        "compared on each tree by likelihood-ratio tests, referring twice the difference in "
        "log-likelihood to a chi-square distribution with as many degrees of freedom as the "
        "alternative has extra rates."
    )
    hidden = [p for p in pairs if hidden_classes(config, p) > 1]
    if hidden:
        text += (
            f" For {listing(hidden)}, every hypothesis was fitted with hidden rate classes "
            f"{cite('beaulieu2013')}, so that a burst of change in one clade is not taken "
            f"for correlated evolution {cite('maddison2015', 'boyko2021')}."
        )
    if (
        pair_summary is not None
        and "boundary" in pair_summary
        and pair_summary["boundary"].astype(str).str.lower().eq("true").any()
    ):
        text += (
            " Where the null hypothesis forbids rates that the alternative leaves free, it "
            "lies on the boundary of the alternative's parameter space and the chi-square "
            f"reference is only approximate {cite('self1987')}."
        )
    boot = {p: spec for p, spec in pairs.items() if spec.get("bootstrap", 0) > 0}
    for p, spec in boot.items():
        n_boot = spec.get("bootstrap_trees", 10)
        if pair_summary is not None and "n_trees_bootstrap" in pair_summary:
            rows = pair_summary[pair_summary["pair"] == p]["n_trees_bootstrap"]
            n_boot = int(rows.max()) if len(rows) else n_boot  # as many as were bootstrapped
        text += (
            f" For {p}, the statistic was also compared with its distribution in "
            f"{spec['bootstrap']} data sets simulated under the fitted null hypothesis on each "
            f"of {plural(n_boot, 'tree')} spread evenly through the sample (parametric "
            f"bootstrap; {REFERENCES['goldman1993'].cite()})."
        )
    if boot:
        text += (
            " A null rate estimated at or near zero (its likelihood at the lower bound within "
            "1.92 log-units of the maximum) was simulated at the upper edge of its 95% "
            "interval rather than at its estimate, since a bootstrap from an estimate on the "
            f"boundary rejects too often {cite('andrews2000', 'berger1994')}; p-values are "
            "(1 + the number of simulated statistics at least as large as the observed one) "
            "/ (1 + the number of data sets)."
        )
    alphas = sorted({spec.get("alpha", 0.05) for spec in pairs.values()})
    text += f" Tests used a significance level of {listing(f'{a:g}' for a in alphas)}."
    return text


def _ancestral_paragraph(config, tables) -> str:
    anc = config.get("ancestral", {})
    choice = anc.get("model", "average")
    how = {
        "average": "averaged over models with each tree's Akaike weights",
        "best": f"under the model with the lowest {CRITERION_NAMES[config['criterion']]} on "
        "each tree",
    }.get(choice, f"under the model {choice}")
    clades = tables.get("clades")
    sampled = (
        clades[clades["kind"] == "sampled"] if clades is not None and "kind" in clades else None
    )
    if anc.get("reference_tree"):
        where = f"the clades of the reference tree {Path(anc['reference_tree']).name}"
    elif sampled is not None and len(sampled):
        where = f"the clades of the {sampled['summary_tree'].iloc[0]}, counted from 0 in the file"
    else:
        where = "the clades of the majority-rule consensus of the tree sample " + cite(
            "margush1981"
        )
        consensus = (
            clades[clades["kind"] == "consensus"]
            if clades is not None and "kind" in clades
            else None
        )
        if consensus is not None and len(consensus) == 1:
            where += (
                " (no clade is in more than half of the trees, so the consensus is "
                "unresolved and only its root is reported)"
            )
    named = list(anc.get("clades", {}))
    if named:
        where += f" and at the named {'clade' if len(named) == 1 else 'clades'} {listing(named)}"
    text = ""
    if "ancestral_states" in tables:
        text += (
            f"Marginal ancestral state probabilities {cite('yang1995')} were computed on each "
            f"tree at {where}, {how}, and averaged across the trees that contain each clade."
        )
    maps = anc.get("maps", 0)
    if "transitions" in tables and maps:
        text += (
            f" {plural(maps, 'stochastic character map')} per tree "
            f"{cite('nielsen2002', 'huelsenbeck2003')} gave the expected number of changes "
            "between states along the whole tree."
        )
    return text.strip()


def _software_paragraph(config, software) -> str:
    libs = [
        f"{name} {software[key]}"
        for key, name in (
            ("numpy", "NumPy"),
            ("scipy", "SciPy"),
            ("dendropy", "DendroPy"),
            ("pandas", "pandas"),
            ("matplotlib", "Matplotlib"),
            ("numba", "Numba"),
        )
        if software.get(key)
    ]
    return (
        f"The analysis ran with mkforest {software.get('mkforest', '')} as a Snakemake "
        f"{software.get('snakemake', '')} workflow under Python {software.get('python', '')} "
        f"({', '.join(libs)}), with seed {config['seed']}. The file manifest.json beside this "
        "text lists the complete settings and the SHA-256 checksum of every input and result "
        "file."
    )


# --------------------------------------------------------------------------- the paragraph

BRIEF_HEADING = "## Methods in one paragraph"
BRIEF_MAX_WORDS = 250


def _quoted_models(config, models) -> list:
    """'"one_rate" (one rate for every change)' once per model name, in config order."""
    pairs = config.get("pairs", {})
    out, seen = [], set()
    for analysis, named in models.items():
        if analysis in pairs:
            continue
        for name, (model, _) in named.items():
            if name not in seen:
                seen.add(name)
                out.append(f"{_quote(name)} ({model_words(model)})")
    return out


def _quote(name: str) -> str:
    return f'"{name}"'


def _brief_roots(config, models) -> str:
    roots = {}
    for analysis, named in models.items():
        if analysis in config.get("pairs", {}):
            continue
        for name, (_, root) in named.items():
            roots.setdefault(root, [])
            if name not in roots[root]:
                roots[root].append(name)
    if len(roots) == 1:
        return f"with {root_words(next(iter(roots)))}"
    main = max(roots, key=lambda r: len(roots[r]))
    others = "; ".join(
        f"{root_words(r)} for {listing(_quote(w) for w in who)}"
        for r, who in roots.items()
        if r != main
    )
    return f"with {root_words(main)} ({others})"


def _brief_pairs(config, models, tables) -> str:
    pairs = config.get("pairs", {})
    if not pairs or ("pair_tests" not in tables and tables.get("pair_summary") is None):
        return ""
    kinds = {"independent": "independent change", "dependent": "mutual dependence"}
    hyps, boots = [], []
    for name, spec in pairs.items():
        first, second = spec["traits"]
        for h, (m, _) in models.get(name, {}).items():
            words = kinds.get(m.kind) or (
                hypothesis_words(h, m.kind, first, second) if m.kind in HYPOTHESES else _quote(h)
            )
            if words not in hyps:
                hyps.append(words)
        if spec.get("bootstrap", 0) > 0:
            n_boot = spec.get("bootstrap_trees", 0)
            summary = tables.get("pair_summary")
            if summary is not None and "n_trees_bootstrap" in summary:
                rows = summary[summary["pair"] == name]["n_trees_bootstrap"]
                n_boot = int(rows.max()) if len(rows) else n_boot
            boots.append((spec["bootstrap"], n_boot))
    who = listing(f"{spec['traits'][0]} with {spec['traits'][1]}" for spec in pairs.values())
    text = (
        f" For {who}, hypotheses of joint change (one trait changing at a time; "
        f"{REFERENCES['pagel1994'].cite()}) were compared on each tree by likelihood-ratio "
        f"tests: {listing(hyps)}"
    )
    if boots:
        n_sets, n_trees = max(boots)
        text += (
            f"; a parametric bootstrap {cite('goldman1993')} simulated {n_sets} data sets "
            f"on each of {plural(n_trees, 'tree')}"
        )
    return text + "."


def _brief_ancestral(config, tables) -> str:
    if "ancestral_states" not in tables:
        return ""
    anc = config.get("ancestral", {})
    maps = anc.get("maps", 0)
    text = f" Marginal ancestral states {cite('yang1995')}"
    if anc.get("model", "average") == "average":
        text += ", averaged over models by Akaike weight,"
    text += " were summarised at the clades of the majority-rule consensus"
    if maps and "transitions" in tables:
        text += (
            f", and {maps} stochastic character maps per tree "
            f"{cite('nielsen2002', 'huelsenbeck2003')} counted changes"
        )
    return text + "."


def brief_paragraph(config: dict, tables: dict, models: dict, software: dict) -> str:
    """One paragraph an author pastes into a methods section (at most 250 words):
    data, trees, models in words, root, optimiser, criterion, support across trees,
    pair tests and ancestral states when they ran, software with versions. Every
    number is read from the tables or the resolved config."""
    used = tables["trees_used"]
    check = tables["data_check"]
    n_trees = len(used)
    n_taxa = int(used["n_tips"].iloc[0])
    by_k = {}
    for trait in config["traits"]["columns"]:
        rows = check[check["trait"] == trait]
        k = int(sum(str(i).startswith("state:") for i in rows["item"]))
        by_k.setdefault(k, []).append(trait)
    traits = [
        f"{listing(names)} ({k} states{' each' if len(names) > 1 else ''})"
        for k, names in by_k.items()
    ]
    tcfg = next(iter(tree_sets(config).values()))  # the first tree set
    burn = tcfg["burnin"]
    dropped = _tree_counts(tables).get("dropped_as_burnin")  # counted, not the setting
    if dropped is None:  # a run from before these counts were recorded
        dropped = int(used["tree"].min()) if burn else 0
    how = (
        "no burn-in"
        if not burn
        else "none discarded as burn-in"
        if dropped == 0
        else "first tree discarded as burn-in"
        if dropped == 1
        else f"first {dropped} trees discarded as burn-in"
    )
    if tcfg["thin"] > 1:
        how += f", every {_ordinal(tcfg['thin'])} tree kept"
    if tcfg.get("sample") is not None:
        how += f", {n_trees} drawn at random"
    crit = CRITERION_NAMES[config["criterion"]]
    fit = config["fitting"]
    if n_trees > 1:
        trees = f"on each of {n_trees} {sample_words(tcfg)} ({how})"
    else:
        trees = "on a single tree"
    n_models = len(_model_names(config, models))
    text = (
        f"We analysed {'; '.join(traits)} for {n_taxa} taxa {trees}. We fitted "
        f"{n_models} continuous-time Markov (Mk) {'model' if n_models == 1 else 'models'} "
        f"{cite('lewis2001')}: {listing(_quoted_models(config, models))}, by maximum "
        f"likelihood {_brief_roots(config, models)}, using L-BFGS-B {cite('byrd1995')} from "
        f"{plural(fit['starts'], 'starting point')} per fit. Models were ranked by {crit} "
        f"{cite(*CRITERION_REFS[config['criterion']])} on each tree; support across trees is "
        f"the mean Akaike weight {cite('burnham2002')} and the share of trees where each "
        "model ranked best."
    )
    text += _brief_pairs(config, models, tables)
    text += _brief_ancestral(config, tables)
    text += (
        f" Analyses ran in mkforest {software.get('mkforest', '')} (citation in the run's "
        f"CITATION.cff) with Snakemake {software.get('snakemake', '')} "
        f"{cite('molder2021')} and SciPy {software.get('scipy', '')}."
    )
    if word_count(text) > BRIEF_MAX_WORDS:  # many models: their names without the words
        text = text.replace(
            listing(_quoted_models(config, models)),
            listing(_quote(m) for m in _model_names(config, models)) + " (described below)",
        )
    return text


def _model_names(config, models) -> list:
    pairs = config.get("pairs", {})
    return list(dict.fromkeys(n for a, named in models.items() if a not in pairs for n in named))


def word_count(text: str) -> int:
    return len([w for w in text.split() if any(ch.isalnum() for ch in w)])


# --------------------------------------------------------------------------- results


def _analysis_results(analysis, support, rate_summary, crit_name, n_used=None) -> str:
    rows = support[support["analysis"] == analysis]
    same = as_text(rows["same_as"]) if "same_as" in rows else pd.Series("", rows.index)
    ranked = rows[same == ""].sort_values("mean_weight", ascending=False, na_position="last")
    n = int(ranked["n_trees"].max()) if len(ranked) else 0
    if n == 0:
        return (
            f"{analysis} was not fitted (see tables/data_check.tsv: a trait needs at least "
            "two observed states)."
        )
    best = ranked.iloc[0]
    k_best = count_of(best["fraction_best"], int(best["n_trees"]))
    across = (
        f"Across the {n} trees"
        if n_used is None or n == n_used
        else f"Across the {n} of {n_used} trees on which {analysis} could be fitted"
    )
    text = (
        f"{across}, {best['model']} received the most support (mean Akaike "
        f"weight {number(best['mean_weight'])}; lowest {crit_name} on {k_best} of "
        f"{int(best['n_trees'])} trees): it was the best model "
        f"{_how_often(k_best, int(best['n_trees']))}."
    )
    if best["mean_weight"] < 0.5:
        text += (
            " No model carries most of the weight on average: the data do not clearly "
            "favour one model."
        )
    others = []
    for row in ranked.iloc[1:].to_dict("records"):
        m = int(row["n_trees"])
        others.append(
            f"{row['model']} (mean weight {number(row['mean_weight'])}; lowest "
            f"{crit_name} on {count_of(row['fraction_best'], m)} of {m} trees; median "
            f"Δ{crit_name} {number(row['median_delta'])}, 95% interval across trees "
            f"{number(row['delta_low95'])} to {number(row['delta_high95'])})"
        )
    if others:
        text += (
            (" The other model: " if len(others) == 1 else " The other models: ")
            + "; ".join(others)
            + "."
        )
    rates = rate_summary[
        (rate_summary["analysis"] == analysis) & (rate_summary["model"] == best["model"])
    ]
    if len(rates):
        parts = [rate_words(r) for r in rates.to_dict("records")]
        text += (
            f" Under {best['model']}, the median rates across trees (central 95% interval; "
            f"changes per unit branch length) were: {'; '.join(parts)}."
        )
    return text


def rate_words(r: dict) -> str:
    """One transition of rate_summary.tsv in words. Trees where the data do not bound
    the rate from above are left out of the median and interval and counted beside
    them, with the smallest bound reached where it ran to the bound ("≥ X"): there
    the data give only a lower limit, never a value (mkforest.engine.summarise)."""
    head = f"{r['from_state']}→{r['to_state']}"
    n_unb = int(r.get("n_unbounded", 0) or 0)
    n_up = int(r.get("n_at_upper", 0) or 0)
    n_est = int(r.get("n_estimated", r.get("n_trees", 0)) or 0)
    if n_unb == 0:
        return (
            f"{head} {number(r['median_rate'])} ({number(r['rate_low95'])} to "
            f"{number(r['rate_high95'])})"
        )
    at_bound = f", at the upper bound (≥ {number(r['at_upper_min'])}) on {n_up}" if n_up else ""
    if n_est == 0:
        return (
            f"{head} not bounded above by the data on any tree{at_bound}; not estimable "
            "from these data"
        )
    return (
        f"{head} {number(r['median_rate'])} ({number(r['rate_low95'])} to "
        f"{number(r['rate_high95'])}) over the {plural(n_est, 'tree')} where the data bound "
        f"it; not bounded above on {n_unb}{at_bound}"
    )


def _cautions(rows: pd.DataFrame, key: str) -> list:
    out = []
    for row in rows.to_dict("records"):
        c = row.get("caution")
        if isinstance(c, str) and c.strip():
            out.append(f"{row[key]}: {c.strip()}")
    return out


def _pair_results(pair, summary) -> str:
    rows = summary[summary["pair"] == pair]
    sentences = []
    for r in rows.to_dict("records"):
        n = int(r["n_trees"])
        if n == 0:
            sentences.append(
                f"{r['null']} against {r['alternative']}: not tested (no tree has both fits)."
            )
            continue
        k = count_of(r["fraction_reject_chi2"], n)
        s = (
            f"The likelihood-ratio test of {r['null']} against {r['alternative']} "
            f"({plural(int(r['df']), 'degree')} of freedom, critical value "
            f"{number(r['critical_chi2'])} at α = {r['alpha']:g}) rejected {r['null']} on {k} of "
            f"{n} trees (median statistic {number(r['median_statistic'])}, 95% interval across "
            f"trees {number(r['statistic_low95'])} to {number(r['statistic_high95'])}; median "
            f"p = {p_value(r['median_p_chi2'])})"
        )
        nb = int(r.get("n_trees_bootstrap", 0) or 0)
        if nb:
            kb = count_of(r["fraction_reject_bootstrap"], nb)
            s += (
                f"; the parametric bootstrap rejected it on {kb} of {nb} trees (median p = "
                f"{p_value(r['median_p_bootstrap'])})"
            )
        sentences.append(s + ".")
    return " ".join(sentences)


def _ancestral_results(analysis, tables) -> str:
    text = []
    states = tables.get("ancestral_states")
    clades = tables.get("clades")
    if states is not None and clades is not None and len(clades):
        top = clades.sort_values("n_tips", ascending=False).iloc[0]
        root = states[(states["analysis"] == analysis) & (states["clade"] == top["clade"])]
        if len(root) and int(top["n_tips"]) == int(clades["n_tips"].max()):
            parts = [
                f"{r['state']} {number(r['mean_probability'])} "
                f"({number(r['probability_low95'])} to {number(r['probability_high95'])})"
                for r in root.to_dict("records")
            ]
            text.append(
                "Mean probabilities of the states at the root across trees (central 95% "
                f"interval): {'; '.join(parts)}."
            )
    trans = tables.get("transitions")
    if trans is not None:
        rows = trans[trans["analysis"] == analysis]
        n_out = int(rows["n_maps_at_upper"].max()) if "n_maps_at_upper" in rows and len(rows) else 0
        left_out = (
            f"; {plural(n_out, 'map')} drawn under fits with a rate the data do not "
            "bound from above left out"
            if n_out
            else ""
        )
        if len(rows) and int(rows["n_maps"].max()) > 0:
            parts = [
                f"{r['from_state']}→{r['to_state']} {number(r['mean_count'], 1)} "
                f"({number(r['count_low95'], 1)} to {number(r['count_high95'], 1)})"
                for r in rows.to_dict("records")
            ]
            text.append(
                f"Expected numbers of changes along the whole tree (mean over "
                f"{int(rows['n_maps'].max())} maps on {plural(int(rows['n_trees'].max()), 'tree')}"
                f"{left_out}, central 95% interval of the maps): {'; '.join(parts)}."
            )
        elif len(rows) and n_out:
            text.append(
                f"No numbers of changes are given: all {n_out} stochastic maps were drawn "
                "under fits with a rate the data do not bound from above, whose change "
                "counts grow with that rate, not with the data."
            )
    return " ".join(text)


def _ancestral_cautions(analysis, tables) -> list:
    """Run-wide cautions of the ancestral stage (from the transitions table) and a
    count of the clades whose states carry a caution of their own."""
    out, common = [], set()
    trans = tables.get("transitions")
    if trans is not None:
        for c in dict.fromkeys(trans.loc[trans["analysis"] == analysis, "caution"].astype(str)):
            if c.strip():
                out.append(f"stochastic maps: {c.strip()}")
                common.update(part.strip() for part in c.split(";"))
    states = tables.get("ancestral_states")
    if states is not None:
        rows = states[states["analysis"] == analysis]
        per_clade = rows.groupby("clade", sort=False)["caution"].first().astype(str)
        own = [
            c for c in per_clade if {part.strip() for part in c.split(";") if part.strip()} - common
        ]
        if own:
            out.append(
                f"ancestral states: {len(own)} of {len(per_clade)} clades carry a caution "
                "of their own (few trees contain them, their taxa are not monophyletic, or "
                "their fits did not converge); see the caution column of "
                "tables/ancestral_states.tsv"
            )
    return out


# --------------------------------------------------------------------------- the whole text


def methods_text(config: dict, tables: dict, models: dict, software: dict) -> str:
    sets = tree_sets(config)
    # the sections below describe the first tree set; the comparison of sets has its own
    tables = {
        name: (t if name in ("tree_set_support", "treatment_support") else first_set(t))
        for name, t in tables.items()
    }
    support = tables["model_support"]
    crit_name = CRITERION_NAMES[config["criterion"]]
    pair_summary = tables.get("pair_summary")
    has_pairs = bool(config.get("pairs")) and ("pair_tests" in tables or pair_summary is not None)
    has_ancestral = "ancestral_states" in tables or "transitions" in tables

    out = [
        "# Methods and results",
        "",
        f"_Written by mkforest {software.get('mkforest', '')} from this run's settings and "
        "tables. Every number is rounded from the table named beside it; edit the wording, "
        "keep the numbers, and check the cautions before citing a result._",
        "",
        BRIEF_HEADING,
        "",
        brief_paragraph(config, tables, models, software),
        "",
        "## Methods in full",
        "",
        "**Data and trees.** "
        + _data_paragraph(config, tables)
        + " "
        + (f"Tree set '{next(iter(sets))}'. " if len(sets) > 1 else "")
        + _trees_paragraph(config, tables)
        + (" " + tree_sets_paragraph(sets) if len(sets) > 1 else ""),
        "",
        "**Models.** " + _models_paragraph(config, models, support),
        "",
        "**Fitting.** " + _fitting_paragraph(config, software),
        "",
        "**Model comparison.** " + _comparison_paragraph(config),
        "",
    ]
    if branches_paragraph(config):
        out += ["**Branch lengths.** " + branches_paragraph(config), ""]
    if has_pairs:
        out += ["**Trait pairs.** " + _pairs_paragraph(config, pair_summary), ""]
    if has_ancestral:
        para = _ancestral_paragraph(config, tables)
        if para:
            out += ["**Ancestral states.** " + para, ""]
    if bayes_paragraph(config, tables):
        out += ["**Bayesian estimation.** " + bayes_paragraph(config, tables), ""]
    out += scan_methods_lines(config, tables)  # the all-pairs scan: report/methods_scan.py
    out += ["**Software.** " + _software_paragraph(config, software), ""]

    out += [
        "## Results",
        "",
        f"Model support is from tables/model_support.tsv, rates from "
        f"tables/rate_summary.tsv{', pair tests from tables/pair_summary.tsv' if has_pairs else ''}"
        f"{', ancestral states and changes from tables/ancestral_states.tsv and tables/transitions.tsv' if has_ancestral else ''}.",
        "",
    ]
    rate_summary = tables["rate_summary"]
    for analysis in models:
        out += [
            f"### {analysis}",
            "",
            _analysis_results(
                analysis, support, rate_summary, crit_name, len(tables["trees_used"])
            ),
        ]
        extra = results_lines(analysis, tables)
        if extra:
            out += ["", " ".join(extra)]
        if has_pairs and pair_summary is not None and analysis in config["pairs"]:
            pr = _pair_results(analysis, pair_summary)
            if pr:
                out += ["", pr]
        if has_ancestral and analysis in config["traits"]["columns"]:
            ar = _ancestral_results(analysis, tables)
            if ar:
                out += ["", ar]
        if bayes_results(analysis, tables):
            out += ["", bayes_results(analysis, tables)]
        notes = _cautions(support[support["analysis"] == analysis], "model")
        if has_pairs and pair_summary is not None and analysis in config["pairs"]:
            rows = pair_summary[pair_summary["pair"] == analysis].copy()
            rows["test"] = rows["null"] + " against " + rows["alternative"]
            notes += _cautions(rows, "test")
        if has_ancestral and analysis in config["traits"]["columns"]:
            notes += _ancestral_cautions(analysis, tables)
        if notes:
            out += ["", "Cautions:", ""] + [f"- {n}" for n in notes]
        out.append("")
    if scan_methods_lines(config, tables):
        out += scan_results(tables.get("scan"))
    body = "\n".join(out)
    refs = cited_in(body)
    body += "\n## References\n\n" + "\n".join(f"- {r.full()}" for r in refs) + "\n"
    return body


def read_tables(paths: dict) -> dict:
    """{name: DataFrame} from {name: path}; state labels and captions stay text."""
    out = {}
    for name, path in paths.items():
        out[name] = pd.read_csv(
            path,
            sep="\t",
            keep_default_na=False,
            na_values=["", "nan", "NaN"],
            dtype={
                "state": str,
                "from_state": str,
                "to_state": str,
                "caution": str,
                "same_as": str,
                "clade": str,
                "model": str,
                "analysis": str,
            },
        )
        for col in ("caution", "same_as"):
            if col in out[name]:
                out[name][col] = as_text(out[name][col])
    return out


def table_name(path) -> str:
    return Path(path).name.removesuffix(".tsv")


def run_warnings(run_dir) -> list:
    """Plain sentences for the end of a run: fits that are impossible (ln L = -inf) and the
    number of models whose summary carries a caution. Empty when the tables are not there."""
    path = Path(run_dir) / "tables" / "model_support.tsv"
    if not path.is_file():
        return bayes_warnings(run_dir)
    support = read_tables({"model_support": path})["model_support"]
    out = []
    if "n_impossible" in support:
        for row in support[support["n_impossible"] > 0].to_dict("records"):
            out.append(
                f"{row['analysis']} / {row['model']}: {int(row['n_impossible'])} of "
                f"{int(row['n_fits'])} fits are impossible (ln L = -inf); see "
                f"{Path(run_dir) / 'tables' / 'data_check.tsv'} and trees.min_branch_length."
            )
    cautious = support[support["caution"].str.strip() != ""]
    if len(cautious):
        out.append(
            f"{len(cautious)} of {len(support)} model summaries carry a caution: read the "
            f"caution column of {path} and the Cautions in {Path(run_dir) / 'methods.md'} "
            "before citing a result."
        )
    return out + bayes_warnings(run_dir)
