"""What the all-pairs scan tests and how its work is split: the ``scan`` block read
once, checked against the trait table, and the pairs dealt into jobs.

Light on purpose (no numba, no SciPy): the Snakefile reads it at every parse.
"""

from __future__ import annotations

import math

from ..errors import did_you_mean

# auto: one job per this many pairs and chunk of trees, at most MAX_AUTO_JOBS
PAIRS_PER_JOB = 25
MAX_AUTO_JOBS = 16


def enabled(config: dict) -> bool:
    scan = config.get("scan")
    return isinstance(scan, dict) and "traits" in scan


def job_config(config: dict) -> dict:
    """Only what a scan job reads: editing models or other stages reruns no scan job."""
    return {
        "scan": config["scan"],
        "fitting": config["fitting"],
        "seed": config["seed"],
        "traits": {
            "columns": config["traits"]["columns"],
            "absent_taxa": config["traits"]["absent_taxa"],
        },
    }


def named_traits(config: dict) -> list:
    """The scan's trait names as the config gives them (all: traits.columns)."""
    names = config["scan"]["traits"]
    return list(config["traits"]["columns"]) if names == "all" else list(names)


def jobs_per_chunk(config: dict) -> int:
    """Jobs per chunk of trees: fixed by the config alone (never by the trait table, the
    trees or the cores), so resuming elsewhere keeps every finished job."""
    n = len(named_traits(config))
    n_pairs = n * (n - 1) // 2
    value = config["scan"].get("jobs_per_chunk", "auto")
    if value == "auto":
        return max(1, min(MAX_AUTO_JOBS, math.ceil(n_pairs / PAIRS_PER_JOB)))
    return int(value)


def name_problems(config: dict, source: str = "config") -> list:
    """Scan traits that are not in traits.columns, or listed twice (one sentence each)."""
    if not enabled(config):
        return []
    names = config["scan"]["traits"]
    columns = list(config.get("traits", {}).get("columns", []))
    if names == "all" or not isinstance(names, list):
        return []
    out = []
    for t in names:
        if t not in columns:
            out.append(
                f"{source}: scan.traits names trait '{t}', which is not in traits.columns "
                f"({', '.join(columns)}).{did_you_mean(t, columns)}"
            )
    for t in sorted({t for t in names if names.count(t) > 1}):
        out.append(f"{source}: scan.traits lists trait '{t}' twice.")
    return out


def scanned(config: dict, traits: dict) -> list:
    """Names of the traits the scan pairs, in order: traits with at least two states
    that pair with at least one other within scan.joint_states."""
    limit = config["scan"]["joint_states"]
    names = [t for t in named_traits(config) if t in traits and traits[t].k >= 2]
    return [a for a in names if any(traits[a].k * traits[b].k <= limit for b in names if b != a)]


def pairs(config: dict, traits: dict) -> list:
    """(first, second) names of every pair tested, in the order of the trait list."""
    names = scanned(config, traits)
    limit = config["scan"]["joint_states"]
    return [
        (a, b)
        for i, a in enumerate(names)
        for b in names[i + 1 :]
        if traits[a].k * traits[b].k <= limit
    ]


def pairs_of_job(all_pairs: list, job: int, n_jobs: int) -> list:
    """The pairs of job number ``job`` (0-based) of ``n_jobs``: dealt in turn, so jobs
    differ by at most one pair. A pair's result never depends on its job (its seeds
    come from the tree and the pair)."""
    return all_pairs[job::n_jobs]


def table_problems(config: dict, traits: dict, source: str = "config") -> list:
    """The scan against the trait table: a named trait that pairs with none, or fewer
    than two traits to pair. One sentence per mistake, naming the key and the trait."""
    if not enabled(config):
        return []
    scan = config["scan"]
    limit = scan["joint_states"]
    names = [t for t in named_traits(config) if t in traits]
    out = []
    if scan["traits"] != "all":
        for t in names:
            k = traits[t].k
            if not any(k * traits[b].k <= limit for b in names if b != t):
                least = min((k * traits[b].k for b in names if b != t), default=0)
                out.append(
                    f"{source}: scan.traits: trait '{t}' has {k} states, so it pairs with no "
                    f"other listed trait within scan.joint_states = {limit} joint states; "
                    f"raise scan.joint_states to {least} (at most 16) or drop the trait."
                )
    if not out and len(pairs(config, traits)) == 0:
        ks = ", ".join(f"{t} ({traits[t].k})" for t in names)
        out.append(
            f"{source}: scan: no pair of traits to test: traits and their states: {ks}; "
            f"scan.joint_states = {limit} needs two traits whose states multiply to at most "
            f"{limit} (binary traits: 4)."
        )
    hidden = scan.get("hidden_classes", 1)
    if isinstance(hidden, int) and not 1 <= hidden <= 4:
        out.append(f"{source}: scan.hidden_classes is {hidden}; use 1 (none) to 4.")
    elif isinstance(hidden, int) and limit * hidden > 32:
        out.append(
            f"{source}: scan.hidden_classes is {hidden} with scan.joint_states = {limit}: "
            f"{limit * hidden} combined states; at most 32 are supported."
        )
    return out
