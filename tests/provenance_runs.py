"""Finished runs of the real workflow, shared by the provenance, CLI and resume tests.

Every run uses a tiny generated data set and input paths relative to its
working directory, so a copied working directory is a complete, independent
run (its manifest names inputs inside the copy). Runs are cached per pytest
session: the first test that asks for one pays for it.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

import yaml
from workflow_helpers import REPO, run_snakemake

from mkforest.demo import make_demo

MKFOREST = str(Path(sys.executable).with_name("mkforest"))
# An outside SHA-256 implementation: GNU coreutils' sha256sum, or Perl's shasum (macOS).
SHA256SUM = ["sha256sum"] if shutil.which("sha256sum") else ["shasum", "-a", "256"]
RUN = "tiny"
_CACHE: dict = {}


def base_config(**changes) -> dict:
    """Two traits, two models, five trees in one chunk (few jobs), no ancestral stage."""
    config = {
        "run": RUN,
        "seed": 11,
        "trees": {"file": "data/trees.nex", "burnin": 1, "per_job": 5},
        "traits": {
            "file": "data/traits.tsv",
            "taxon_column": "taxon",
            "columns": ["glow", "habitat"],
            "order": {"habitat": ["litter", "rock", "canopy"]},
        },
        "models": {"one_rate": {"kind": "equal"}, "free": {"kind": "unconstrained"}},
        "fitting": {"starts": 2},
        "ancestral": {"enabled": False},
    }
    config.update(changes)
    return config


def prepare_workdir(work: Path, config: dict) -> Path:
    """Data and config.yaml in ``work``; returns the config path."""
    work.mkdir(parents=True, exist_ok=True)
    data = work / "data"
    if not (data / "trees.nex").exists():
        make_demo(data, n_tips=16, n_trees=6, seed=7)
    path = work / "config.yaml"
    path.write_text(yaml.safe_dump(config, sort_keys=False))
    return path


def finished_run(tmp_path_factory, name: str = "base", **changes) -> tuple:
    """(workdir, config path) of a finished run, made once per session and name."""
    if name not in _CACHE:
        work = tmp_path_factory.mktemp(f"run_{name}")
        cfg = prepare_workdir(work, base_config(**changes))
        proc = run_snakemake(work, cfg)
        assert proc.returncode == 0, proc.stderr[-4000:]
        _CACHE[name] = (work, cfg)
    return _CACHE[name]


def copy_run(src: Path, dst: Path) -> Path:
    """An independent copy of a finished working directory (Snakemake's records included)."""
    shutil.copytree(src, dst, symlinks=True)
    return dst


def mkforest(*args, cwd=None) -> subprocess.CompletedProcess:
    """The installed command line, as a user runs it."""
    env = dict(os.environ, PYTHONPATH=str(REPO))
    return subprocess.run(
        [MKFOREST, *map(str, args)], capture_output=True, text=True, cwd=cwd, env=env, timeout=300
    )
