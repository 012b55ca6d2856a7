# Input functions and targets of the ancestral-state stage (rules in ancestral.smk).

ANC = config["ancestral"]


def ancestral_chunk_inputs(kind):
    """Input function: one chunk's fit tables ('fits' or 'rates') of every model of an analysis."""

    def files(wildcards):
        return [
            f"{OUT}/fits/{wildcards.analysis}/{m}/chunk_{wildcards.chunk}.{kind}.tsv"
            for m in ANALYSES[wildcards.analysis]
        ]

    return files


def ancestral_chunk_files(wildcards):
    """Every tree set's chunks: each set's states and maps on its own trees."""
    return [f"{OUT}/ancestral/{a}/chunk_{c}.npz" for a in ANALYSES for c in chunk_ids()]


def prepared_tree_chunks(wildcards):
    """The first tree set's chunks: its summary tree gives the clades every set reports."""
    return [
        f"{OUT}/prepared/trees/chunk_{c}.npz" for c in chunk_ids(first_set_only=True)
    ]


def ancestral_params(wildcards):
    """Only this analysis's slice of the config (see fit_params)."""
    return stable(
        {
            "analysis": wildcards.analysis,
            "config": ancestral_job_config(config, wildcards.analysis),
        }
    )


def ancestral_runtime(wildcards, attempt):
    """Minutes for one chunk: maps take ~25 ms per tree at 200 tips and 100 maps."""
    return 10 + 5 * attempt * max(1, trees_per_job() // 100)


# Ancestral state trees: "<analysis>.png" and ".svg" per analysis, a tree of more tips
# than a page holds in pages ("<analysis>.part2.png", ...), in one folder: their number
# follows the summary tree's tips.
ANCESTRAL_TREE_PAGES = f"{OUT}/plots/ancestral_trees"
# Change counts: "changes.png" and ".svg", as many analyses a page as fit, then
# "changes.part2.png", ...: their number follows the traits.
CHANGE_PAGES = f"{OUT}/plots/changes"


# {analysis: [models with hidden rate classes]}: one class tree per analysis x such model,
# "<analysis>_<model>.png" and ".svg" in one folder, a tree of more tips than a page holds
# in pages ("<analysis>_<model>.part2.png", ...); no folder when no model has classes
HIDDEN_CLASS_MODELS = hidden_class_models(config)
CLASS_TREE_PAGES = [f"{OUT}/plots/class_trees"] if HIDDEN_CLASS_MODELS else []


def ancestral_targets(wildcards):
    if not ANC["enabled"]:
        return []
    return (
        [
            f"{OUT}/tables/ancestral_states.tsv",
            f"{OUT}/tables/transitions.tsv",
            f"{OUT}/tables/state_times.tsv",
            f"{OUT}/tables/clades.tsv",
            f"{OUT}/tables/ancestral_classes.tsv",
        ]
        + [ANCESTRAL_TREE_PAGES, CHANGE_PAGES]
        + CLASS_TREE_PAGES
    )


TARGET_FUNCTIONS.append(ancestral_targets)
