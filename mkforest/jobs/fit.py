"""One fit job: one analysis x one model x a chunk of trees -> tidy rows."""

from __future__ import annotations

import numpy as np

from ..engine.branches import Treatment, parse_treatment
from ..engine.compare import information_criteria
from ..engine.fitting import fit_model
from ..engine.likelihood import check_root
from ..engine.hidden import class_notes, check_no_class_in_transitions, with_hidden_classes
from ..engine.models import KINDS, build_model
from ..errors import InputError, join_problems
from ..seeds import derive_seed

FIT_COLUMNS = ["tree_set", "analysis", "model", "tree", "n_taxa", "n_params", "log_likelihood",
               "aic", "aicc", "bic", "converged", "n_starts", "n_agree", "at_lower", "at_upper",
               "open_upper", "root", "branches", "branch_parameter", "branch_at_bound", "note",
               "structure"]
RATE_COLUMNS = ["tree_set", "analysis", "model", "tree", "from_state", "to_state", "rate",
                "parameter", "at_bound"]


def branch_treatment(config: dict, analysis: str, model: str) -> Treatment:
    """The branch-length treatment of one model of an analysis (pair hypotheses and models
    without ``branches`` use the given lengths)."""
    if analysis not in config["traits"]["columns"]:
        return Treatment()
    return parse_treatment(config["models"][model].get("branches"), f"models.{model}.branches")


def analysis_setup(config: dict, analysis: str, traits: dict) -> tuple:
    """(Trait to fit, {model name: (RateModel, root)}) for a trait or a pair analysis."""
    if analysis in config["traits"]["columns"]:
        from ..data.config import trait_models
        trait = traits[analysis]
        models = {}
        for name in trait_models(config, analysis):
            spec = config["models"][name]
            try:
                check_no_class_in_transitions(spec.get("transitions"), trait.states,
                                              f"model '{name}'")
                model = build_model(spec["kind"], trait.states, spec.get("transitions"), name)
                model = with_hidden_classes(model, spec.get("hidden_classes", 1),
                                            spec.get("class_switch", "equal"), name)
            except InputError as exc:
                raise InputError(f"trait '{analysis}': {exc}") from None
            root = check_root(spec.get("root", "uniform"), trait.states, f"models.{name}",
                              f"a state of trait '{analysis}'")
            models[name] = (model, root)
        return trait, models
    if analysis in config.get("pairs", {}):
        # contract: pair_analysis(name, pair config (defaults filled), {trait name: Trait})
        #   -> (joint Trait, {hypothesis name: (RateModel, root)})
        from ..engine.pairs import pair_analysis
        return pair_analysis(analysis, config["pairs"][analysis], traits)
    raise InputError(f"analysis '{analysis}' is neither a trait in traits.columns nor a pair.")


def table_problems(config: dict, source: str = "config") -> list:
    """Every model and pair checked against the trait table's states, if the
    table exists yet: one sentence per mistake, naming the model, trait and label."""
    from pathlib import Path

    from ..data.config import analyses, trait_models
    from ..data.traits import read_traits

    problems = []
    for name, spec in config["models"].items():
        try:
            parse_treatment(spec.get("branches"), f"models.{name}.branches")
        except InputError as exc:
            problems.append(f"{source}: {exc}")
    tcfg = config["traits"]
    if not Path(tcfg["file"]).is_file():
        return problems
    try:
        traits = read_traits(tcfg["file"], tcfg["taxon_column"], tcfg["columns"], tcfg["missing"],
                             tcfg["separator"], tcfg["order"])
    except InputError as exc:
        return problems + [str(exc)]
    for name, trait in traits.items():
        if trait.k < 2:
            which = f"only the state '{trait.states[0]}'" if trait.k else "no state at all"
            problems.append(f"trait table '{tcfg['file']}': trait '{name}' has {which} in its "
                            "column, so there is no change to model. Drop it from traits.columns "
                            f"(or list its possible states in traits.order.{name}).")
    for analysis in analyses(config):
        # one model at a time, so that every faulty model is named, not only the first
        if analysis in traits and traits[analysis].k < 2:
            continue  # named above
        names = trait_models(config, analysis) if analysis in traits else [None]
        for name in names:
            if name and config["models"][name].get("kind") not in KINDS:
                continue  # the schema check has named it
            one = dict(config, models={name: config["models"][name]}) if name else config
            try:
                analysis_setup(one, analysis, traits)
            except InputError as exc:
                problems.append(f"{source}: {exc}")
    return problems


def check_config(raw: dict, source: str = "config") -> dict:
    """The workflow's check before any job: the config (schema, names) and its
    models against the trait table, every mistake at once in one InputError."""
    from ..data.config import config_problems

    config, problems = config_problems(raw, source)
    try:
        problems += table_problems(config, source)
    except Exception:  # a config already found faulty may not reach the table check
        if not problems:
            raise
    if problems:
        raise InputError(join_problems(problems))
    return config


def fit_chunk(trees: list, trait, model, root: str, analysis: str, seed: int, starts: int = 5,
              lower: float = 1e-6, upper: float = 1e4, absent: str = "error",
              max_starts: int = 20, branches: Treatment | None = None) -> tuple:
    """Fit one model to one trait on each tree. Returns (fit rows, rate rows) as dicts."""
    fits, rates = [], []
    treatment = branches or Treatment()
    varies = len(trait.observed_states()) >= 2
    for tree in trees:
        X = trait.tip_partials(tree, absent=absent)
        n = int((X.sum(axis=1) < trait.k).sum())
        row = {"tree_set": tree.tree_set, "analysis": analysis, "model": model.name,
               "tree": tree.index, "n_taxa": n,
               "n_params": model.n_params + treatment.n_params, "root": root,
               "branches": treatment.label, "branch_parameter": treatment.fixed,
               "branch_at_bound": "",
               "structure": f"{model.signature()} | root {root} | branches {treatment.label}"}
        if not varies:
            row.update(log_likelihood=np.nan, aic=np.nan, aicc=np.nan, bic=np.nan, converged=False,
                       n_starts=0, n_agree=0, at_lower="", at_upper="", open_upper="",
                       note="not fitted: fewer than two observed states")
            fits.append(row)
            continue
        res = fit_model(tree, X, model, root, n_starts=starts,
                        seed=derive_seed(seed, tree.index, analysis, model.name),
                        lower=lower, upper=upper, max_starts=max_starts, branches=treatment)
        ic = information_criteria(res.log_likelihood, res.n_params, n)
        notes = list(res.notes) + class_notes(model, res)
        if np.isinf(ic["aicc"]):
            notes.append(f"AICc undefined: {n} taxa with data for {res.n_params} rates")
        if res.branch_at_bound:
            notes.append(f"{treatment.name} at its {res.branch_at_bound} bound")
        row.update(log_likelihood=res.log_likelihood, **ic, converged=res.converged,
                   n_starts=res.n_starts, n_agree=res.n_agree, at_lower=",".join(res.at_lower),
                   at_upper=",".join(res.at_upper), open_upper=",".join(res.open_upper),
                   note="; ".join(notes),
                   branch_parameter=res.branch_parameter if np.isfinite(res.branch_parameter)
                   else None, branch_at_bound=res.branch_at_bound)
        fits.append(row)
        bound_of = {**{x: "lower" for x in res.at_lower}, **{x: "open" for x in res.open_upper},
                    **{x: "upper" for x in res.at_upper}}
        for a, b, p in model.transitions():
            i, j = model.states.index(a), model.states.index(b)
            label = model.labels[p] if p >= 0 else "fixed"
            rates.append({"tree_set": tree.tree_set, "analysis": analysis, "model": model.name,
                          "tree": tree.index,
                          "from_state": a, "to_state": b, "rate": float(res.q_matrix[i, j]),
                          "parameter": label,
                          "at_bound": bound_of.get(label, "")})
    return fits, rates
