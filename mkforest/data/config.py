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

from ..errors import InputError

SCHEMA = Path(__file__).resolve().parents[2] / "workflow" / "schemas" / "config.schema.yaml"
SAFE_NAME = re.compile(r"^[A-Za-z0-9_.-]+$")
BUILTIN_KINDS = ("equal", "symmetric", "unconstrained")


MAX_CLASSES = 4


def check_classes(n_classes, where: str) -> int:
    """Hidden rate classes R as an int in 1..MAX_CLASSES, or an InputError naming ``where``."""
    if isinstance(n_classes, bool) or not isinstance(n_classes, int) \
            or not 1 <= n_classes <= MAX_CLASSES:
        raise InputError(f"{where}: hidden_classes is {n_classes!r}; use a whole number from 1 "
                         f"(no hidden classes) to {MAX_CLASSES}.")
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


def validate_config(config: dict, source: str = "config") -> dict:
    """Validate against the schema, fill defaults, and check cross-references.

    Returns a new dict; raises InputError naming the key at fault.
    """
    import jsonschema

    schema = yaml.safe_load(SCHEMA.read_text())
    config = copy.deepcopy(config or {})
    check_renamed(config, source)
    errors = sorted(jsonschema.Draft202012Validator(schema).iter_errors(config),
                    key=lambda e: list(e.absolute_path))
    if errors:
        e = errors[0]
        key = ".".join(str(p) for p in e.absolute_path) or "(top level)"
        raise InputError(f"{source}: key '{key}': {e.message}")
    _fill_defaults(schema, config)
    check_names(config, source)
    return config


RENAMED_KINDS = {"all_different": "unconstrained"}


def check_renamed(config: dict, source: str = "config") -> None:
    """Model kinds of the first release: one sentence naming the new word."""
    models = config.get("models") if isinstance(config, dict) else None
    for name, model in (models or {}).items():
        kind = model.get("kind") if isinstance(model, dict) else None
        if kind in RENAMED_KINDS:
            raise InputError(f"{source}: models.{name}.kind is '{kind}': this model kind is now "
                             f"called '{RENAMED_KINDS[kind]}'.")


def check_names(config: dict, source: str = "config") -> None:
    """Names used in file paths must be plain; models and pairs must name known traits."""
    traits = config["traits"]["columns"]
    for t in traits:
        if not SAFE_NAME.match(t):
            raise InputError(f"{source}: trait column '{t}' (traits.columns) has characters that "
                             "cannot be used in file names; rename the column using letters, "
                             "digits, '_', '-' or '.'.")
    if len(set(traits)) != len(traits):
        raise InputError(f"{source}: traits.columns lists a trait twice.")
    for name, model in config["models"].items():
        if not SAFE_NAME.match(name):
            raise InputError(f"{source}: model name '{name}' (models) must use only letters, "
                             "digits, '_', '-' or '.'.")
        if model["kind"] == "custom":
            if "applies_to" not in model:
                raise InputError(f"{source}: models.{name}: a custom model must say which traits it "
                                 "applies to (applies_to: [trait, ...]).")
            if "transitions" not in model:
                raise InputError(f"{source}: models.{name}: a custom model needs 'transitions'.")
        elif "transitions" in model:
            raise InputError(f"{source}: models.{name}: 'transitions' only goes with kind: custom.")
        check_classes(model.get("hidden_classes", 1), f"{source}: models.{name}")
        for t in model.get("applies_to", []):
            if t not in traits:
                raise InputError(f"{source}: models.{name}.applies_to names trait '{t}', which is "
                                 f"not in traits.columns ({', '.join(traits)}).")
    for name, pair in config.get("pairs", {}).items():
        if not SAFE_NAME.match(name):
            raise InputError(f"{source}: pair name '{name}' (pairs) must use only letters, "
                             "digits, '_', '-' or '.'.")
        if name in traits:
            raise InputError(f"{source}: pair name '{name}' is also a trait name; choose another.")
        for t in pair["traits"]:
            if t not in traits:
                raise InputError(f"{source}: pairs.{name}.traits names '{t}', which is not in "
                                 f"traits.columns ({', '.join(traits)}).")
        check_classes(pair.get("hidden_classes", 1), f"{source}: pairs.{name}")
        if pair["traits"][0] == pair["traits"][1]:
            raise InputError(f"{source}: pairs.{name}: the two traits must differ.")
        for h in list(pair.get("hypotheses", [])) + list(pair.get("custom", {})):
            if not SAFE_NAME.match(h):
                raise InputError(f"{source}: pairs.{name}: hypothesis name '{h}' must use only "
                                 "letters, digits, '_', '-' or '.'.")
    anc = config.get("ancestral", {}).get("model", "average")
    if anc not in ("average", "best") and anc not in config["models"]:
        raise InputError(f"{source}: ancestral.model is '{anc}': use average, best, or a model "
                         f"name from models ({', '.join(config['models'])}).")


def load_config(path) -> dict:
    path = Path(path)
    if not path.is_file():
        raise InputError(f"config file '{path}' does not exist.")
    try:
        raw = yaml.safe_load(path.read_text())
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        at = f", line {mark.line + 1}" if mark else ""
        raise InputError(f"config file '{path}'{at}: not valid YAML ({getattr(exc, 'problem', exc)}).") from None
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
    job = {"analysis": analysis, "model": model, "seed": config["seed"],
           "fitting": config["fitting"],
           "traits": {"columns": [], "absent_taxa": tcfg["absent_taxa"]},
           "models": {}, "pairs": {}}
    if analysis in tcfg["columns"]:
        job["traits"]["columns"] = [analysis]
        job["models"] = {model: config["models"][model]}
    else:
        job["pairs"] = {analysis: config["pairs"][analysis]}
    return job
