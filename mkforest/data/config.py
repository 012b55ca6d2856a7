"""The run configuration: validation with defaults, and what it asks to compute.

The Snakefile validates the config with the same schema
(workflow/schemas/config.schema.yaml); this module also serves the command
line and the tests, and resolves which models apply to which analysis.
"""

from __future__ import annotations

import copy
import re
from pathlib import Path

import yaml

from ..errors import InputError, did_you_mean, join_problems

SCHEMA = Path(__file__).resolve().parents[2] / "workflow" / "schemas" / "config.schema.yaml"
SAFE_NAME = re.compile(r"^[A-Za-z0-9_.-]+$")
BUILTIN_KINDS = ("equal", "symmetric", "unconstrained")


MAX_CLASSES = 4


def check_classes(n_classes, where: str) -> int:
    """Hidden rate classes R as an int in 1..MAX_CLASSES, or an InputError naming ``where``."""
    if (
        isinstance(n_classes, bool)
        or not isinstance(n_classes, int)
        or not 1 <= n_classes <= MAX_CLASSES
    ):
        raise InputError(
            f"{where}: hidden_classes is {n_classes!r}; use a whole number from 1 "
            f"(no hidden classes) to {MAX_CLASSES}."
        )
    return n_classes


def _fill_defaults(schema: dict, value):
    """Fill defaults from a JSON schema, recursively into objects that exist."""
    if not isinstance(value, dict) or schema.get("type") != "object":
        return value
    for key, sub in schema.get("properties", {}).items():
        if key not in value and "default" in sub:
            value[key] = copy.deepcopy(sub["default"])
        if key in value:
            _fill_defaults(sub, value[key])
    extra = schema.get("additionalProperties")
    if isinstance(extra, dict):
        for key in value:
            if key not in schema.get("properties", {}):
                _fill_defaults(extra, value[key])
    return value


def _dotted(path) -> str:
    return ".".join(str(p) for p in path)


def _schema_problem(error, source: str) -> list:
    """Our sentence(s) for one jsonschema error, with a suggestion where a word is misspelt."""
    path = list(error.absolute_path)
    key = _dotted(path) or "(top level)"
    if error.validator == "additionalProperties" and isinstance(error.instance, dict):
        known = list(error.schema.get("properties", {}))
        out = []
        for extra in error.instance:
            if extra in known:
                continue
            where = f"{key}." if path else ""
            out.append(
                f"{source}: key '{where}{extra}' is not a known key."
                f"{did_you_mean(where + extra, [where + k for k in known])} "
                f"Keys allowed here: {', '.join(known)}."
            )
        return out
    if error.validator == "enum":
        return [
            f"{source}: key '{key}' is '{error.instance}'; choose one of "
            f"{', '.join(map(str, error.validator_value))}.{did_you_mean(error.instance, error.validator_value)}"
        ]
    if error.validator == "required":
        missing = error.message.split("'")[1] if "'" in error.message else error.message
        where = f"{key}." if path else ""
        return [f"{source}: key '{where}{missing}' is required and missing."]
    return [f"{source}: key '{key}': {error.message}"]


def config_problems(config: dict, source: str = "config") -> tuple:
    """(config with defaults filled, [one sentence per mistake]) — every mistake at once.

    Schema mistakes (unknown or misspelt keys, wrong types, unknown choices) and
    cross-references (traits, models, pairs) are all collected; nothing stops at
    the first one.
    """
    import jsonschema

    schema = yaml.safe_load(SCHEMA.read_text())
    config = copy.deepcopy(config or {})
    if not isinstance(config, dict):
        return config, [
            f"{source}: the config must be a mapping of keys (run, trees, traits, models, ...)."
        ]
    problems, renamed_at = renamed_problems(config, source)
    for e in sorted(
        jsonschema.Draft202012Validator(schema).iter_errors(config),
        key=lambda e: [str(p) for p in e.absolute_path],
    ):
        path = tuple(e.absolute_path)
        if path not in renamed_at and path[:2] != ("bayes", "prior"):
            problems += _schema_problem(e, source)
    _fill_defaults(schema, config)
    problems += name_problems(config, source)
    problems += bayes_problems(config, source)
    return config, problems


def validate_config(config: dict, source: str = "config") -> dict:
    """Validate against the schema, fill defaults, and check cross-references.

    Returns a new dict; raises one InputError listing every mistake (one
    sentence per line), each naming the key at fault.
    """
    config, problems = config_problems(config, source)
    if problems:
        raise InputError(join_problems(problems))
    return config


RENAMED_KINDS = {"all_different": "unconstrained"}


def renamed_problems(config: dict, source: str = "config") -> tuple:
    """Model kinds of the first release: one sentence naming the new word.

    Returns (sentences, {paths already explained}).
    """
    out, at = [], set()
    models = config.get("models")
    for name, model in (models if isinstance(models, dict) else {}).items():
        kind = model.get("kind") if isinstance(model, dict) else None
        if isinstance(kind, str) and kind in RENAMED_KINDS:
            out.append(
                f"{source}: models.{name}.kind is '{kind}': this model kind is now "
                f"called '{RENAMED_KINDS[kind]}'."
            )
            at.add(("models", name, "kind"))
    return out, at


def _names(value) -> list:
    return [v for v in value if isinstance(v, str)] if isinstance(value, list) else []


def _entries(value) -> dict:
    return (
        {k: v for k, v in value.items() if isinstance(v, dict)} if isinstance(value, dict) else {}
    )


def name_problems(config: dict, source: str = "config") -> list:
    """Names used in file paths must be plain; models, pairs, state orders and
    the ancestral stage must name known traits and models. One sentence per mistake."""
    problems = tree_set_problems(config, source)
    tcfg = config.get("traits") if isinstance(config.get("traits"), dict) else {}
    traits = _names(tcfg.get("columns"))
    models = _entries(config.get("models"))
    for t in traits:
        if not SAFE_NAME.match(t):
            problems.append(
                f"{source}: trait column '{t}' (traits.columns) has characters that "
                "cannot be used in file names; rename the column using letters, "
                "digits, '_', '-' or '.'."
            )
    if len(set(traits)) != len(traits):
        twice = sorted({t for t in traits if traits.count(t) > 1})
        problems.append(f"{source}: traits.columns lists trait '{twice[0]}' twice.")
    listed = f"traits.columns ({', '.join(traits)})"

    def classes_problem(value, where):
        try:
            check_classes(value, where)
        except InputError as exc:
            problems.append(str(exc))

    def unknown_trait(t, key):
        problems.append(
            f"{source}: {key} names trait '{t}', which is not in {listed}.{did_you_mean(t, traits)}"
        )

    for t in tcfg.get("order") if isinstance(tcfg.get("order"), dict) else {}:
        if traits and t not in traits:
            unknown_trait(t, "traits.order")
    for name, model in models.items():
        if not SAFE_NAME.match(name):
            problems.append(
                f"{source}: model name '{name}' (models) must use only letters, "
                "digits, '_', '-' or '.'."
            )
        if model.get("kind") == "custom":
            if "applies_to" not in model:
                problems.append(
                    f"{source}: models.{name}: a custom model must say which traits "
                    "it applies to (applies_to: [trait, ...])."
                )
            if "transitions" not in model:
                problems.append(f"{source}: models.{name}: a custom model needs 'transitions'.")
        elif "transitions" in model:
            problems.append(f"{source}: models.{name}: 'transitions' only goes with kind: custom.")
        classes_problem(model.get("hidden_classes", 1), f"{source}: models.{name}")
        for t in _names(model.get("applies_to")):
            if traits and t not in traits:
                unknown_trait(t, f"models.{name}.applies_to")
    for name, pair in _entries(config.get("pairs")).items():
        if not SAFE_NAME.match(name):
            problems.append(
                f"{source}: pair name '{name}' (pairs) must use only letters, "
                "digits, '_', '-' or '.'."
            )
        if name in traits:
            problems.append(f"{source}: pair name '{name}' is also a trait name; choose another.")
        pt = _names(pair.get("traits"))
        for t in pt:
            if traits and t not in traits:
                unknown_trait(t, f"pairs.{name}.traits")
        classes_problem(pair.get("hidden_classes", 1), f"{source}: pairs.{name}")
        if len(pt) == 2 and pt[0] == pt[1]:
            problems.append(f"{source}: pairs.{name}: the two traits must differ.")
        for h in _names(pair.get("hypotheses")) + list(_entries(pair.get("custom"))):
            if not SAFE_NAME.match(h):
                problems.append(
                    f"{source}: pairs.{name}: hypothesis name '{h}' must use only "
                    "letters, digits, '_', '-' or '.'."
                )
    anc = config.get("ancestral") if isinstance(config.get("ancestral"), dict) else {}
    anc_model = anc.get("model", "average")
    if (
        isinstance(anc_model, str)
        and anc_model not in ("average", "best")
        and anc_model not in models
    ):
        problems.append(
            f"{source}: ancestral.model is '{anc_model}': use average, best, or a model "
            f"name from models ({', '.join(models)})."
            f"{did_you_mean(anc_model, ['average', 'best', *models])}"
        )
    return problems


PRIOR_FORMS = {
    "exponential": ("mean",),
    "gamma": ("shape", "mean"),
    "log_uniform": ("lower", "upper"),
}


def prior_problem(prior, where: str) -> str | None:
    """One sentence when a rate prior block (``bayes.prior``) is not one of the three
    forms with positive numbers, else None. Units: expected changes along the tree height."""
    forms = "; ".join(
        f"{{{k}: {{{', '.join(f'{a}: ...' for a in v)}}}}}" for k, v in PRIOR_FORMS.items()
    )
    if not isinstance(prior, dict) or len(prior) != 1:
        return f"{where} must name one prior, one of {forms}."
    ((kind, values),) = prior.items()
    if kind not in PRIOR_FORMS:
        return (
            f"{where}: '{kind}' is not a prior; use one of {forms}."
            f"{did_you_mean(str(kind), list(PRIOR_FORMS))}"
        )
    wanted = PRIOR_FORMS[kind]
    if not isinstance(values, dict) or set(values) != set(wanted):
        got = ", ".join(map(str, values)) if isinstance(values, dict) else repr(values)
        return f"{where}.{kind} needs exactly {', '.join(wanted)} (it has {got or 'nothing'})."
    for key in wanted:
        v = values[key]
        if isinstance(v, bool) or not isinstance(v, (int, float)) or not v > 0:
            return (
                f"{where}.{kind}.{key} is {v!r}; use a positive number (changes per tree height)."
            )
    if kind == "log_uniform" and not values["lower"] < values["upper"]:
        return f"{where}.log_uniform: lower ({values['lower']}) must be below upper ({values['upper']})."
    return None


def bayes_problems(config: dict, source: str = "config") -> list:
    """The bayes block: its prior, and model names that exist (a model of models, or a
    hypothesis of a pair). One sentence per mistake."""
    block = config.get("bayes")
    if not isinstance(block, dict):
        return []
    problems = []
    problem = prior_problem(block.get("prior"), "bayes.prior")
    if problem:
        problems.append(f"{source}: {problem}")
    known = list(_entries(config.get("models")))
    for pair in _entries(config.get("pairs")).values():
        known += [h for h in _names(pair.get("hypotheses", ["independent", "dependent"]))]
        known += list(_entries(pair.get("custom")))
    for name in _names(block.get("models")):
        if name not in known:
            problems.append(
                f"{source}: bayes.models names '{name}', which is neither a model in models "
                f"nor a pair hypothesis.{did_you_mean(name, sorted(set(known)))}"
            )
    return problems


def bayes_analyses(config: dict) -> dict:
    """{analysis: [model names sampled]}: every analysis's models that bayes.models lists
    (all of them when it is null); analyses left with none are dropped. Empty when
    bayes is not enabled."""
    block = config.get("bayes", {})
    if not block.get("enabled"):
        return {}
    wanted = block.get("models")
    out = {
        a: [m for m in ms if wanted is None or m in wanted] for a, ms in analyses(config).items()
    }
    return {a: ms for a, ms in out.items() if ms}


def spread_evenly(n: int, wanted) -> list:
    """Positions 0..n-1 of ``wanted`` trees spread evenly through n (the first and the last
    included; all n when wanted is None or at least n)."""
    if wanted is None or wanted >= n:
        return list(range(n))
    if wanted == 1:
        return [0]
    return sorted({round(i * (n - 1) / (wanted - 1)) for i in range(wanted)})


def bayes_trees(used_rows: list, tree_set: str, wanted) -> list:
    """(tree, chunk) of the trees of one tree set that Bayesian estimation uses, from the
    rows of tables/trees_used.tsv (dicts with tree_set, tree, chunk as text or numbers)."""
    rows = [r for r in used_rows if str(r["tree_set"]) == tree_set]
    return [(int(rows[i]["tree"]), int(rows[i]["chunk"])) for i in spread_evenly(len(rows), wanted)]


def bayes_job_config(config: dict, analysis: str, model: str) -> dict:
    """What one Bayesian job (analysis x model x chunk) reads: the fit job's slice plus the
    sampler settings (not bayes.models or enabled, so that editing those does not rerun
    the sampling of another model)."""
    job = fit_job_config(config, analysis, model)
    block = config["bayes"]
    job["bayes"] = {
        k: block[k] for k in ("chains", "warmup", "draws", "prior", "trees", "saved_draws")
    }
    return job


def tree_set_problems(config: dict, source: str = "config") -> list:
    """Exactly one of trees and tree_sets; set names usable in file names."""
    problems = []
    if ("trees" in config) == ("tree_sets" in config):
        problems.append(
            f"{source}: give either 'trees' (one tree sample) or 'tree_sets' "
            "(several samples to compare), "
            + ("not both." if "trees" in config else "and neither is present.")
        )
    for name in _entries(config.get("tree_sets")):
        if not SAFE_NAME.match(name):
            problems.append(
                f"{source}: tree set name '{name}' (tree_sets) must use only "
                "letters, digits, '_', '-' or '.'."
            )
    return problems


def tree_sets(config: dict) -> dict:
    """{set name: {file, burnin, thin, sample, root, per_job}} in config order; a config
    with ``trees`` has one set, named by trees.name (default 'trees')."""
    if "tree_sets" in config:
        return dict(config["tree_sets"])
    spec = dict(config["trees"])
    return {spec.pop("name", "trees"): spec}


def load_config(path) -> dict:
    path = Path(path)
    if not path.is_file():
        raise InputError(f"config file '{path}' does not exist.")
    try:
        raw = yaml.safe_load(path.read_text())
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        at = f", line {mark.line + 1}" if mark else ""
        raise InputError(
            f"config file '{path}'{at}: not valid YAML ({getattr(exc, 'problem', exc)})."
        ) from None
    return validate_config(raw, f"config file '{path}'")


def trait_models(config: dict, trait: str) -> list:
    """Model names that apply to a trait, in config order."""
    out = []
    for name, model in config["models"].items():
        targets = model.get("applies_to")
        if targets is None or trait in targets:
            out.append(name)
    return out


def pair_models(config: dict, pair: str) -> list:
    spec = config["pairs"][pair]
    names = list(spec.get("hypotheses", []))
    names += [c for c in spec.get("custom", {}) if c not in names]
    return names


def analyses(config: dict) -> dict:
    """{analysis name: [model names]} for every trait, then every pair."""
    out = {t: trait_models(config, t) for t in config["traits"]["columns"]}
    for p in config.get("pairs", {}):
        out[p] = pair_models(config, p)
    return {a: m for a, m in out.items() if m}


def hidden_class_models(config: dict) -> dict:
    """{analysis: [model names with hidden rate classes (hidden_classes > 1)]}, only
    analyses that have such a model."""
    out = {}
    for analysis, names in analyses(config).items():
        if analysis in config["traits"]["columns"]:
            hid = [m for m in names if config["models"][m].get("hidden_classes", 1) > 1]
        else:
            hid = names if config["pairs"][analysis].get("hidden_classes", 1) > 1 else []
        if hid:
            out[analysis] = hid
    return out


def fit_job_config(config: dict, analysis: str, model: str) -> dict:
    """A reduced config holding only what one fit job (analysis x model) reads.

    Snakemake reruns a job when its parameters change; passing the whole config
    would rerun every fit whenever any model or trait is added.
    """
    tcfg = config["traits"]
    job = {
        "analysis": analysis,
        "model": model,
        "seed": config["seed"],
        "fitting": config["fitting"],
        "traits": {"columns": [], "absent_taxa": tcfg["absent_taxa"]},
        "models": {},
        "pairs": {},
    }
    if analysis in tcfg["columns"]:
        job["traits"]["columns"] = [analysis]
        job["models"] = {model: config["models"][model]}
    else:
        job["pairs"] = {analysis: config["pairs"][analysis]}
    return job


def ancestral_job_config(config: dict, analysis: str) -> dict:
    """A reduced config holding only what one ancestral job (one analysis) reads: its models
    (or its pair), the criterion, the seed and the ancestral settings. Changing another
    analysis's model, or a setting of another stage, leaves this job's params unchanged."""
    tcfg = config["traits"]
    anc = config["ancestral"]
    job = {
        "analysis": analysis,
        "seed": config["seed"],
        "criterion": config["criterion"],
        "traits": {"columns": [], "absent_taxa": tcfg["absent_taxa"]},
        "models": {},
        "pairs": {},
        "ancestral": {"model": anc["model"], "maps": anc["maps"]},
    }
    if analysis in tcfg["columns"]:
        job["traits"]["columns"] = [analysis]
        job["models"] = {m: config["models"][m] for m in trait_models(config, analysis)}
    else:
        job["pairs"] = {analysis: config["pairs"][analysis]}
    return job


# Relative CPU per fit by kind, measured on 200-tip, 3-state trees (benchmarks/
# bench_workflow.py job logs: equal ~2.5 ms, symmetric ~8 ms, unconstrained ~22 ms);
# a custom model lies between. Pairs fit joint models of four or more states.
_KIND_WEIGHT = {"equal": 1, "symmetric": 3, "unconstrained": 10, "custom": 5}
_PAIR_WEIGHT = 30


def fit_job_weight(config: dict, analysis: str, model: str) -> int:
    """A fit job's expected cost relative to an equal-rates fit, for the scheduler:
    the costliest jobs start first, so that no long job is left running alone at the
    end while the other cores idle (longest-first is the classic rule for spreading
    jobs over machines; Graham 1969, from memory). Only the order changes, never a result."""
    if analysis in config.get("pairs", {}):
        spec = config["pairs"][analysis]
        weight = _PAIR_WEIGHT
    else:
        spec = config["models"][model]
        weight = _KIND_WEIGHT.get(spec.get("kind"), 5)
        branches = spec.get("branches", "as_given")
        if isinstance(branches, str) and branches not in ("as_given", "unit"):
            weight *= 2  # an estimated branch-length parameter
    return int(weight * spec.get("hidden_classes", 1) ** 2)
