"""The one-paragraph methods (at most 250 words) an author pastes into a manuscript."""

from __future__ import annotations

from ...data.config import tree_sets
from ...engine.models import HYPOTHESES
from ...engine.treatments import parse_label
from ..citations import REFERENCES, cite
from ..methods_branches import (
    treatment_brief,
    treatment_label,
    tree_sets_brief,
)
from ..words import hypothesis_words, model_words
from .data import sample_words, tree_counts
from .models import CRITERION_NAMES, CRITERION_REFS, root_words
from .numbers import listing, ordinal, plural

# --------------------------------------------------------------------------- the paragraph

BRIEF_HEADING = "## Methods in one paragraph"
BRIEF_MAX_WORDS = 250


def quoted_models(config, models) -> list:
    """'"one_rate" (one rate for every change)' once per model name, in config order: its
    rate structure and, when the models do not all use the given lengths, its branch-length
    treatment ('"stretched" (one rate for all changes; branch lengths raised to a power
    kappa, estimated on each tree)')."""
    pairs = config.get("pairs", {})
    specs = config.get("models", {})
    labels = {name: treatment_label(config, name) for name in specs}
    mixed = set(labels.values()) != {"as_given"}
    out, seen = [], set()
    for analysis, named in models.items():
        if analysis in pairs:
            continue
        for name, (model, _) in named.items():
            if name not in seen:
                seen.add(name)
                how = f"; {treatment_brief(labels.get(name, 'as_given'))}" if mixed else ""
                out.append(f"{_quote(name)} ({model_words(model)}{how})")
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
    dropped = tree_counts(tables).get("dropped_as_burnin")  # counted, not the setting
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
        how += f", every {ordinal(tcfg['thin'])} tree kept"
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
        f"{cite('lewis2001')}: {listing(quoted_models(config, models))}, by maximum "
        f"likelihood {_brief_roots(config, models)}, using L-BFGS-B {cite('byrd1995')} from "
        f"{plural(fit['starts'], 'starting point')} per fit. Models were ranked by {crit} "
        f"{cite(*CRITERION_REFS[config['criterion']])} on each tree; support across trees is "
        f"the mean Akaike weight {cite('burnham2002')} and the share of trees where each "
        "model ranked best."
    )
    text += tree_sets_brief(tree_sets(config), tables.get("all_trees_used"))
    text += _brief_pairs(config, models, tables)
    text += _brief_ancestral(config, tables)
    text += (
        f" Analyses ran in mkforest {software.get('mkforest', '')} (citation in the run's "
        f"CITATION.cff) with Snakemake {software.get('snakemake', '')} "
        f"{cite('molder2021')} and SciPy {software.get('scipy', '')}."
    )
    full = listing(quoted_models(config, models))
    if word_count(text) > BRIEF_MAX_WORDS:  # many models: names and treatments only ...
        text = text.replace(full, treatment_names(config, models) + " (described below)")
    if word_count(text) > BRIEF_MAX_WORDS:  # ... or their names alone
        text = text.replace(
            treatment_names(config, models),
            listing(_quote(m) for m in _model_names(config, models)),
        )
    return text


def treatment_names(config, models) -> str:
    """The models by name, each with its branch-length treatment in a word or two where
    the models do not all use the given lengths ('"stretched" (kappa estimated)'):
    two models of one structure never read alike."""

    labels = {m: treatment_label(config, m) for m in _model_names(config, models)}
    mixed = set(labels.values()) != {"as_given"}
    short = {"as_given": "lengths as given", "unit": "unit lengths"}

    def word(label):
        t = parse_label(label)
        return short.get(t.name) or (
            f"{t.name} {t.fixed:g}" if t.fixed is not None else f"{t.name} estimated"
        )

    return listing(
        _quote(m) + (f" ({word(labels[m])})" if mixed else "") for m in _model_names(config, models)
    )


def _model_names(config, models) -> list:
    pairs = config.get("pairs", {})
    return list(dict.fromkeys(n for a, named in models.items() if a not in pairs for n in named))


def word_count(text: str) -> int:
    return len([w for w in text.split() if any(ch.isalnum() for ch in w)])
