# Input functions and settings of the pair rules (pairs.smk).

PAIRS = config["pairs"]


wildcard_constraints:
    pair=r"[A-Za-z0-9_.\-]+",


def pair_bootstrap_files(wildcards):
    return [
        f"{OUT}/pairs/{p}/bootstrap/chunk_{c}.tsv"
        for p, spec in PAIRS.items()
        if spec["bootstrap"] > 0
        for c in chunk_ids()
    ]


def pair_chunk_fits(kind):
    """Input function: one chunk's fit tables ('fits' or 'rates') of every hypothesis of a pair."""

    def files(wildcards):
        return [
            f"{OUT}/fits/{wildcards.pair}/{h}/chunk_{wildcards.chunk}.{kind}.tsv"
            for h in ANALYSES[wildcards.pair]
        ]

    return files


def pair_params(wildcards):
    """Only what a pair job reads, so that editing other parts of the config does
    not rerun a costly bootstrap."""
    job = {
        "pairs": {wildcards.pair: PAIRS[wildcards.pair]},
        "fitting": config["fitting"],
        "seed": config["seed"],
    }
    return {"pair": wildcards.pair, "config": stable(job)}


def pair_bootstrap_runtime(wildcards, attempt):
    """Minutes for one chunk: about 0.1 s per simulated data set at 100 tips
    (two fits of 5 starts), for each test on each bootstrapped tree of the chunk,
    with a wide margin."""
    spec = PAIRS[wildcards.pair]
    per_chunk = min(spec["bootstrap_trees"], trees_per_job())
    n_tests = max(
        1, len(ANALYSES[wildcards.pair]) * (len(ANALYSES[wildcards.pair]) - 1) // 2
    )
    return 10 + attempt * int(per_chunk * n_tests * spec["bootstrap"] * 0.5 / 60)


# one folder per kind of pair figure: <pair>.png/.svg, a pair too big for a page in
# parts (<pair>.part2.png, ...); one job draws every pair
PAIR_PLOTS = ["rates_by_state", "joint_rates", "tests"]
PAIR_PAGES = {kind: f"{OUT}/plots/pairs/{kind}" for kind in PAIR_PLOTS}


def pair_targets(wildcards):
    if not PAIRS:
        return []
    return [
        f"{OUT}/tables/pair_tests.tsv",
        f"{OUT}/tables/pair_summary.tsv",
    ] + list(PAIR_PAGES.values())


TARGET_FUNCTIONS.append(pair_targets)
