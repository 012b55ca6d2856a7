"""What one cluster submission asks for, checked against the cluster's nodes.

A group of fit jobs (the SLURM profile's ``group-components``) runs as one
submission. Snakemake lays a group out in layers that fit within ``cores``
(the profile's node size): the fits of one layer run side by side, the layers
one after another. So a submission asks for min(group size, cores) cores and
that many fits' memory. A request larger than every node never starts (SLURM
leaves it pending, reason PartitionConfig); this module lets the workflow say
so before anything is submitted.
"""

from __future__ import annotations

import shutil
import subprocess


def group_request(group_size: int, cores, fit_mem_mb: int, other_mem_mb: int = 0) -> tuple:
    """(cores, memory in MB) of the largest submission: a group of ``group_size``
    fits laid out within ``cores`` (None: no limit), or a single job of
    ``other_mem_mb``."""
    width = max(1, group_size if cores is None else min(group_size, int(cores)))
    return width, max(width * fit_mem_mb, other_mem_mb)


def parse_sinfo(text: str) -> list:
    """[(cpus, memory MB)] per node from ``sinfo -h -N -o "%c %m"`` output."""
    nodes = []
    for line in text.splitlines():
        parts = line.split()
        if len(parts) >= 2 and parts[0].isdigit():
            nodes.append((int(parts[0]), int(parts[1].rstrip("+"))))
    return nodes


def query_nodes(partition=None, timeout: float = 20.0):
    """The nodes ``sinfo`` reports (in ``partition`` if given), or None when
    sinfo is not installed or does not answer."""
    sinfo = shutil.which("sinfo")
    if sinfo is None:
        return None
    cmd = [sinfo, "-h", "-N", "-o", "%c %m"] + (["-p", str(partition)] if partition else [])
    try:
        out = subprocess.run(cmd, capture_output=True, text=True, timeout=timeout)
    except (OSError, subprocess.TimeoutExpired):
        return None
    if out.returncode != 0:
        return None
    return parse_sinfo(out.stdout) or None


def request_problem(
    cores_asked: int, mem_asked: int, nodes: list, group_size: int, cores_setting
) -> str | None:
    """One sentence when no node can hold the request, else None."""
    if any(c >= cores_asked and m >= mem_asked for c, m in nodes):
        return None
    big_c = max(c for c, _ in nodes)
    big_m = max(m for _, m in nodes)
    set_to = f"cores: {cores_setting}" if cores_setting is not None else "no cores: line"
    return (
        f"mkforest: a group of {group_size} fits would ask SLURM for {cores_asked} cores and "
        f"{mem_asked} MB at once, but the largest node has {big_c} cores and {big_m} MB "
        f"(sinfo). In profiles/slurm/config.yaml ({set_to}) set cores: to at most {big_c}, "
        "the cores of your nodes; the fits of a group beyond that run one after another."
    )
