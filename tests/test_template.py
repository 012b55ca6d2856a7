"""config/template.yaml documents every key of the config schema with its
default, so that a key added to workflow/schemas/config.schema.yaml without a
line in the template fails here, by name."""

from __future__ import annotations

import re

import yaml
from workflow_helpers import REPO

from mkforest.data.config import SCHEMA, validate_config

TEMPLATE = REPO / "config" / "template.yaml"
NAME = "<name>"
# Top-level keys used instead of another (tree_sets replaces trees): a valid
# config has one or the other, so the template shows these in a comment.
INSTEAD = ("tree_sets",)


def _objects(schema: dict) -> list:
    """The object forms a value may take (itself, or its oneOf/anyOf alternatives)."""
    alts = schema.get("oneOf", []) + schema.get("anyOf", [])
    return [schema] + [a for a in alts if isinstance(a, dict)]


def schema_keys(schema: dict, prefix: str = "", alternative: bool = False) -> dict:
    """{dotted key: (schema of the key, whether it belongs to an alternative form)};
    entries of a free-named mapping (additionalProperties) appear as <name>."""
    out = {}
    for form in _objects(schema):
        alt = alternative or form is not schema
        for key, sub in form.get("properties", {}).items():
            path = f"{prefix}{key}"
            out[path] = (sub, alt)
            out.update(schema_keys(sub, path + ".", alt))
        extra = form.get("additionalProperties")
        if isinstance(extra, dict):
            out.update(schema_keys(extra, f"{prefix}{NAME}.", alt))
    return out


def template_values(value, schema: dict, prefix: str = "") -> dict:
    """{dotted key with <name> for free-named entries: [values set in the template]}."""
    out: dict = {}
    if not isinstance(value, dict):
        return out
    forms = _objects(schema)
    props = {k: s for f in forms for k, s in f.get("properties", {}).items()}
    extra = next(
        (
            f["additionalProperties"]
            for f in forms
            if isinstance(f.get("additionalProperties"), dict)
        ),
        None,
    )
    for key, sub_value in value.items():
        if key in props:
            path, sub_schema = f"{prefix}{key}", props[key]
        elif extra is not None:
            path, sub_schema = f"{prefix}{NAME}", extra
        else:
            continue
        out.setdefault(path, []).append(sub_value)
        for k, v in template_values(sub_value, sub_schema, path + ".").items():
            out.setdefault(k, []).extend(v)
    return out


def template_problems(schema: dict, text: str) -> tuple:
    """(schema keys the template lacks, keys set to something other than their default)."""
    comments = "\n".join(line.split("#", 1)[1] for line in text.splitlines() if "#" in line)
    found = template_values(yaml.safe_load(text), schema)
    missing, wrong = [], []
    for key, (sub, alternative) in schema_keys(schema).items():
        alternative = alternative or key.split(".")[0] in INSTEAD
        last = key.rsplit(".", 1)[-1]
        # a key of an alternative form (trees.root: {outgroup: [...]}) may be shown in a comment
        if key not in found and not (alternative and re.search(rf"\b{re.escape(last)}:", comments)):
            missing.append(key)
            continue
        if "default" in sub:
            for value in found.get(key, []):
                example_of_empty = sub["default"] in ({}, []) and value not in ({}, [])
                if value != sub["default"] and not example_of_empty:
                    wrong.append(
                        f"'{key}' is {value!r} in the template, but its default in the "
                        f"schema is {sub['default']!r}"
                    )
    return missing, wrong


def test_every_schema_key_is_in_the_template_with_its_default():
    schema = yaml.safe_load(SCHEMA.read_text())
    keys = schema_keys(schema)
    assert "models.<name>.kind" in keys and "trees.root.outgroup" in keys  # the walk reaches down
    missing, wrong = template_problems(schema, TEMPLATE.read_text())
    assert not missing, "\n".join(
        f"config/template.yaml does not document key '{k}' (it is in "
        "workflow/schemas/config.schema.yaml): add it to the template, set to its default, "
        "with a comment saying what it does."
        for k in missing
    )
    assert not wrong, "\n".join(f"config/template.yaml: key {w}; write the default." for w in wrong)


def test_template_is_a_valid_config():
    validate_config(yaml.safe_load(TEMPLATE.read_text()), "config/template.yaml")


def test_drift_check_names_a_new_key_and_a_wrong_default():
    """The check above can fail: a key added to the schema, and a default changed
    in the template, are each reported by name."""
    schema = yaml.safe_load(SCHEMA.read_text())
    schema["properties"]["models"]["additionalProperties"]["properties"]["made_up"] = {
        "type": "string",
        "default": "x",
    }
    text = TEMPLATE.read_text().replace("  per_job: auto\n", "  per_job: 7\n")
    missing, wrong = template_problems(schema, text)
    assert missing == ["models.<name>.made_up"]
    assert wrong == [
        "'trees.per_job' is 7 in the template, but its default in the schema is 'auto'"
    ]
