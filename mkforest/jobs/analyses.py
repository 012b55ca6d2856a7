"""What an analysis fits, and the workflow's check of a config against the trait table.

Kept apart from the fitting code so that reading the Snakefile (which runs the
check) and the jobs that only describe models (methods text, ancestral figures)
do not import the optimiser: on a cluster every job parses the Snakefile again.
"""

from __future__ import annotations

from ..engine.hidden import check_no_class_in_transitions, with_hidden_classes
from ..engine.models import KINDS, build_model, check_root
from ..engine.treatments import Treatment, parse_treatment
from ..errors import InputError, join_problems
from . import scan_plan


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
                check_no_class_in_transitions(
                    spec.get("transitions"), trait.states, f"model '{name}'"
                )
                model = build_model(spec["kind"], trait.states, spec.get("transitions"), name)
                model = with_hidden_classes(
                    model, spec.get("hidden_classes", 1), spec.get("class_switch", "equal"), name
                )
            except InputError as exc:
                raise InputError(f"trait '{analysis}': {exc}") from None
            root = check_root(
                spec.get("root", "uniform"),
                trait.states,
                f"models.{name}",
                f"a state of trait '{analysis}'",
            )
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
        traits = read_traits(
            tcfg["file"],
            tcfg["taxon_column"],
            tcfg["columns"],
            tcfg["missing"],
            tcfg["separator"],
            tcfg["order"],
        )
    except InputError as exc:
        return problems + [str(exc)]
    for name, trait in traits.items():
        if trait.k < 2:
            which = f"only the state '{trait.states[0]}'" if trait.k else "no state at all"
            problems.append(
                f"trait table '{tcfg['file']}': trait '{name}' has {which} in its "
                "column, so there is no change to model. Drop it from traits.columns "
                f"(or list its possible states in traits.order.{name})."
            )
    problems += scan_plan.table_problems(config, traits, source)
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
    problems += scan_plan.name_problems(config, source)
    try:
        problems += table_problems(config, source)
    except Exception:  # a config already found faulty may not reach the table check
        if not problems:
            raise
    if problems:
        raise InputError(join_problems(problems))
    return config
