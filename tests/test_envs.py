"""The conda environment for cluster jobs mirrors the package's dependencies."""

import re
from pathlib import Path

import tomllib
import yaml

REPO = Path(__file__).resolve().parent.parent
CONDA_NAMES = {"pyyaml": "pyyaml", "dendropy": "dendropy"}


def _split(spec: str):
    m = re.match(r"^\s*([A-Za-z0-9_.\-]+)\s*(.*)$", spec)
    return m.group(1).lower(), m.group(2).replace(" ", "")


def test_conda_env_matches_pyproject():
    project = tomllib.loads((REPO / "pyproject.toml").read_text())["project"]
    wanted = dict(_split(d) for d in project["dependencies"])
    env = yaml.safe_load((REPO / "envs" / "mkforest.yaml").read_text())
    listed = dict(_split(d) for d in env["dependencies"] if isinstance(d, str))
    python = listed.pop("python")
    assert python == project["requires-python"]
    assert listed == {CONDA_NAMES.get(k, k): v for k, v in wanted.items()}
