"""What an analysis fits, and the workflow's check of a config against the trait table.

Kept apart from the fitting code so that reading the Snakefile (which runs the
check) and the jobs that only describe models (methods text, ancestral figures)
do not import the optimiser: on a cluster every job parses the Snakefile again.
"""

from __future__ import annotations

from ..data.config import analyses, trait_models
from ..engine.hidden import check_no_class_in_transitions, config_classes, with_hidden_classes
from ..engine.models import KINDS, build_model, check_root
from ..engine.treatments import Treatment, parse_treatment
from ..errors import InputError, join_problems
from . import scan_plan


def model_treatment(config: dict, model: str) -> Treatment:
    """The branch-length treatment of ``models.<model>`` (the one reader of its
    ``branches`` value)."""
    return parse_treatment(config["models"][model]["branches"], f"models.{model}.branches")


def hidden_classes(config: dict, analysis: str, model: str | None = None) -> int:
    """Hidden rate classes R of one model of a trait (``models.<model>``), or of every
    hypothesis of a pair (``pairs.<analysis>``)."""
    if analysis in config["traits"]["columns"]:
        return config_classes(config["models"][model], f"models.{model}")
    return config_classes(config["pairs"][analysis], f"pairs.{analysis}")


def hidden_class_models(config: dict) -> dict:
    """{analysis: [model names with hidden rate classes (hidden_classes > 1)]}, only
    analyses that have such a model."""
    out = {}
    for analysis, names in analyses(config).items():
        hid = [m for m in names if hidden_classes(config, analysis, m) > 1]
        if hid:
            out[analysis] = hid
    return out


def branch_treatment(config: dict, analysis: str, model: str) -> Treatment:
    """The branch-length treatment of one model of an analysis (pair hypotheses use the
    given lengths)."""
    if analysis not in config["traits"]["columns"]:
        return Treatment()
    return model_treatment(config, model)


def unit_branches_only(config: dict) -> bool:
    """Every fit of the run uses one unit of length per branch (``branches: unit`` on every
    model that applies to a trait, and no pairs): trees written without branch lengths
    can then be read, each branch given the length 1."""
    from ..data.config import analyses

    if config.get("pairs"):
        return False
    names = {m for a, models in analyses(config).items() for m in models}
    return bool(names) and all(
        branch_treatment(config, a, m).name == "unit"
        for a, models in analyses(config).items()
        for m in models
    )


def analysis_setup(config: dict, analysis: str, traits: dict) -> tuple:
    """(Trait to fit, {model name: (RateModel, root)}) for a trait or a pair analysis."""
    if analysis in config["traits"]["columns"]:
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
                    model, hidden_classes(config, analysis, name), spec["class_switch"], name
                )
            except InputError as exc:
                raise InputError(f"trait '{analysis}': {exc}") from None
            root = check_root(
                spec["root"],
                trait.states,
                f"models.{name}",
                f"a state of trait '{analysis}'",
            )
            models[name] = (model, root)
        return trait, models
    if analysis in config["pairs"]:
        # contract: pair_analysis(name, pair config (defaults filled), {trait name: Trait})
        #   -> (joint Trait, {hypothesis name: (RateModel, root)})
        from ..engine.pairs import pair_analysis

        return pair_analysis(analysis, config["pairs"][analysis], traits)
    raise InputError(f"analysis '{analysis}' is neither a trait in traits.columns nor a pair.")


def table_problems(config: dict, source: str = "config") -> list:
    """Every model and pair checked against the trait table's states, if the
    table exists yet: one sentence per mistake, naming the model, trait and label."""
    from pathlib import Path

    from ..data.traits import read_traits

    problems = []
    faulty = set()  # entries named here, left out of the check against the table
    for name in config["models"]:
        try:
            model_treatment(config, name)
        except InputError as exc:
            problems.append(f"{source}: {exc}")
        try:
            config_classes(config["models"][name], f"{source}: models.{name}")
        except InputError as exc:
            problems.append(str(exc))
            faulty.add(name)
    for name in config["pairs"]:
        try:
            config_classes(config["pairs"][name], f"{source}: pairs.{name}")
        except InputError as exc:
            problems.append(str(exc))
            faulty.add(name)
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
        if analysis in faulty:
            continue
        names = trait_models(config, analysis) if analysis in traits else [None]
        for name in names:
            if name in faulty or (name and config["models"][name].get("kind") not in KINDS):
                continue  # named above, or by the schema check
            one = dict(config, models={name: config["models"][name]}) if name else config
            try:
                analysis_setup(one, analysis, traits)
            except InputError as exc:
                problems.append(f"{source}: {exc}")
    return problems


def path_problems(config: dict, source: str = "config", made=()) -> list:
    """Every input file of the config that does not exist and that no rule makes
    (``made``: paths the workflow writes itself, the demo's data): one sentence each,
    naming the key, before the workflow builds its graph."""
    from pathlib import Path

    keys = []
    if isinstance(config.get("trees"), dict):
        keys.append(("trees.file", config["trees"].get("file")))
    for name, spec in (config.get("tree_sets") or {}).items():
        if isinstance(spec, dict):
            keys.append((f"tree_sets.{name}.file", spec.get("file")))
    if isinstance(config.get("traits"), dict):
        keys.append(("traits.file", config["traits"].get("file")))
    made = {str(Path(m)) for m in made}
    problems = []
    for key, value in keys:
        if not isinstance(value, str) or str(Path(value)) in made:
            continue
        path = Path(value)
        if not path.is_file():
            what = "is a folder, not a file" if path.is_dir() else "does not exist"
            where = (
                ""
                if path.is_absolute()
                else f" (read from the folder the run starts in, {Path.cwd()})"
            )
            problems.append(f"{source}: {key} '{value}' {what}{where}.")
    return problems


def check_config(raw: dict, source: str = "config", made=()) -> dict:
    """The workflow's check before any job: the config (schema, names), its input files
    (``made``: those a rule writes) and its models against the trait table, every mistake
    at once in one InputError."""
    from ..data.config import config_problems

    config, problems = config_problems(raw, source)
    problems += path_problems(raw if not isinstance(config, dict) else config, source, made)
    problems += scan_plan.name_problems(config, source)
    try:
        problems += table_problems(config, source)
    except Exception:  # a config already found faulty may not reach the table check
        if not problems:
            raise
    if problems:
        raise InputError(join_problems(problems))
    return config
