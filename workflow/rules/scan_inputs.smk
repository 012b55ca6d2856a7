# Input functions and settings of the scan rules (scan.smk).
from mkforest.jobs import scan_plan

SCAN = scan_plan.enabled(config)
SCAN_JOBS = scan_plan.jobs_per_chunk(config) if SCAN else 0


wildcard_constraints:
    job=r"\d+",


def scan_params(wildcards=None):
    """Only what a scan job reads (the scan block, fitting, seed, trait columns)."""
    return stable(scan_plan.job_config(config))


def scan_pair_files(wildcards):
    return [
        f"{OUT}/scan/chunk_{c}.job_{j:03d}.tsv"
        for c in chunk_ids()
        for j in range(SCAN_JOBS)
    ]


def scan_runtime(wildcards, attempt):
    """Minutes for one job: about 0.1 s per dependent fit at 100 tips (binary pairs,
    measured: benchmarks/bench_scan.py), for its pairs on each tree, with a wide margin.
    """
    n = len(scan_plan.named_traits(config))
    per_job = math.ceil(n * (n - 1) / 2 / max(1, SCAN_JOBS))
    return 10 + attempt * int(trees_per_job() * per_job * 0.5 / 60)


def scan_targets(wildcards):
    if not SCAN:
        return []
    return [
        f"{OUT}/tables/scan.tsv",
        f"{OUT}/tables/scan_per_tree.tsv",
        f"{OUT}/plots/scan.png",
        f"{OUT}/plots/scan.svg",
    ]


TARGET_FUNCTIONS.append(scan_targets)
