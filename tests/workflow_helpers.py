"""Helpers for end-to-end tests: a tiny generated data set and real Snakemake runs."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import yaml

from mkforest.demo import make_demo

REPO = Path(__file__).resolve().parent.parent
SNAKEMAKE = str(Path(sys.executable).with_name("snakemake"))


def tiny_config(workdir: Path, **overrides) -> Path:
    """Write a small generated data set and a config for it into workdir."""
    data = workdir / "data"
    if not (data / "trees.nex").exists():
        make_demo(data, n_tips=16, n_trees=6, seed=7)
    config = {
        "run": "tiny",
        "seed": 11,
        "trees": {"file": str(data / "trees.nex"), "burnin": 1, "per_job": 2},
        "traits": {
            "file": str(data / "traits.tsv"),
            "taxon_column": "taxon",
            "columns": ["glow", "habitat"],
            "order": {"habitat": ["litter", "rock", "canopy"]},
        },
        "models": {"one_rate": {"kind": "equal"}, "free": {"kind": "unconstrained"}},
        "fitting": {"starts": 2},
        "ancestral": {"enabled": False},
    }
    for key, value in overrides.items():
        config[key] = value
    path = workdir / "config.yaml"
    path.write_text(yaml.safe_dump(config, sort_keys=False))
    return path


def run_snakemake(workdir: Path, configfile: Path, *extra, cores: int = 2, timeout: int = 600):
    """Run the real workflow; returns the CompletedProcess (never raises on failure)."""
    cmd = [
        SNAKEMAKE,
        "--snakefile",
        str(REPO / "Snakefile"),
        "--directory",
        str(workdir),
        "--configfile",
        str(configfile),
        "--cores",
        str(cores),
        *extra,
    ]
    env = dict(os.environ, PYTHONPATH=str(REPO))
    return subprocess.run(cmd, capture_output=True, text=True, timeout=timeout, env=env)
