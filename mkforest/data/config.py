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
from .traits import safe_column_name, table_header

SCHEMA = Path(__file__).resolve().parents[2] / "workflow" / "schemas" / "config.schema.yaml"
SAFE_NAME = re.compile(r"^[A-Za-z0-9_.-]+$")


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
    problems = []
    for e in sorted(
        jsonschema.Draft202012Validator(schema).iter_errors(config),
        key=lambda e: [str(p) for p in e.absolute_path],
    ):
        if tuple(e.absolute_path)[:2] != ("bayes", "prior"):  # bayes_problems says it
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
                f"cannot be used in file names; write it as {safe_column_name(t)} (the "
                "column is read under that name) or rename the column using letters, "
                "digits, '_', '-' or '.'."
            )
    if len(set(traits)) != len(traits):
        twice = sorted({t for t in traits if traits.count(t) > 1})
        problems.append(f"{source}: traits.columns lists trait '{twice[0]}' twice.")
    listed = f"traits.columns ({', '.join(traits)})"

    def unknown_trait(t, key):
        if t in table_columns():  # then traits.columns is what is misspelt: say so there
            problems.append(
                f"{source}: {key} names trait '{t}', a column of the trait table that "
                f"{listed} does not list; add it to traits.columns or correct the name there."
            )
            return
        problems.append(
            f"{source}: {key} names trait '{t}', which is not in {listed}.{did_you_mean(t, traits)}"
        )

    def table_columns() -> list:
        file = tcfg.get("file")
        return table_header(file) if isinstance(file, str) and Path(file).is_file() else []

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
