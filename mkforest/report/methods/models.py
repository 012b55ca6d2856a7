"""The models, fitting and model-comparison paragraphs of the methods text."""

from __future__ import annotations

from ...engine.models import HYPOTHESES, KIND_TABLE
from ...engine.search import AGREE_TOL, RATE_STARTS, SAME_F, SAME_X, ZERO_PROBES
from ...engine.summarise import as_text
from ..citations import REFERENCES, cite
from ..words import hypothesis_structure
from .numbers import listing, plural

CRITERION_NAMES = {"aicc": "AICc", "aic": "AIC", "bic": "BIC"}
CRITERION_REFS = {
    "aicc": ("akaike1974", "hurvich1989"),
    "aic": ("akaike1974",),
    "bic": ("schwarz1978",),
}


# --------------------------------------------------------------------------- model structures


def describe_model(model, pair_traits=None) -> str:
    """Plain-words structure of one candidate model, with its number of rates."""
    if pair_traits and model.kind in HYPOTHESES:
        first, second = pair_traits
        words = hypothesis_structure(model.kind, first, second)
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


def models_paragraph(config, models, support) -> str:
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


def fitting_paragraph(config, software) -> str:
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
            "there as having reached it. Before two agreeing starts were accepted, one "
            "further descent was run from the best optimum with, in turn, each rate it held "
            "at zero lifted, its largest rates moved together to the upper bound, every "
            f"rate at the upper bound, and each of its {ZERO_PROBES} smallest rates above "
            f"zero set to zero; a descent that ended more than {AGREE_TOL:g} units higher "
            "counted as a start."
        )
    else:
        text += " With a single start per fit, convergence could not be checked."
    return text


def comparison_paragraph(config) -> str:
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
