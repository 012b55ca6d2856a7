"""The methods text's sentences on Bayesian estimation, written from the run's settings
and its tables (tables/marginal_likelihoods.tsv, posterior_summary.tsv,
bayes_model_support.tsv): priors with their units, the sampler, chains, warm-up and
draws, diagnostics with the count of flagged posteriors, the marginal-likelihood
method, the two summaries across trees, and a caution on the prior."""

from __future__ import annotations

import math

from ..jobs.bayes import few_trees_carry
from .citations import cite

PRIOR_WORDS = {
    "exponential": lambda v: f"an exponential prior with mean {v['mean']:g}",
    "gamma": lambda v: f"a gamma prior with shape {v['shape']:g} and mean {v['mean']:g}",
    "log_uniform": lambda v: f"a log-uniform prior from {v['lower']:g} to {v['upper']:g}",
}


def _n(x) -> str:
    return "n/a" if x is None or not math.isfinite(float(x)) else f"{float(x):.2f}"


def prior_words(block: dict) -> str:
    ((kind, values),) = block.items()
    return PRIOR_WORDS[kind](values)


def bayes_paragraph(config: dict, tables: dict) -> str:
    """The **Bayesian estimation.** paragraph; '' when the stage did not run."""
    ml = tables.get("marginal_likelihoods")
    if ml is None or not config.get("bayes", {}).get("enabled"):
        return ""
    b = config["bayes"]
    n_trees = ml["tree"].nunique()
    n_fits = int(ml["log_marginal_likelihood"].notna().sum())
    n_flagged = int(ml["flagged"].astype(str).str.lower().eq("true").sum())
    used = tables.get("trees_used")
    of = f" of the {len(used)} used" if used is not None and len(used) > n_trees else ""
    models = sorted(set(ml["model"]))
    out = [
        f"Posterior distributions of the rates were sampled on {n_trees} trees{of} "
        f"(spread evenly through the sample) for {len(models)} models and hypotheses "
        f"({', '.join(models)}). Every free rate had {prior_words(b['prior'])} on its number "
        "of expected changes along the tree's root-to-tip height H (a rate r per unit of "
        "branch length is r·H changes; the rates in the tables are per unit of branch "
        "length), the rates independent of one another; an estimated branch-length "
        "parameter had a uniform prior over its range.",
        f"The sampler was the No-U-Turn sampler {cite('hoffman2014')} on the logarithms of "
        f"the rates (the Jacobian in the density, the exact gradient of the likelihood), "
        f"with {b['chains']} chains per tree, each {b['warmup']} warm-up iterations and "
        f"{b['draws']} kept draws.",
        f"Convergence was judged per parameter by rank-normalised R-hat and bulk and tail "
        f"effective sample sizes {cite('vehtari2021')}; {n_flagged} of {n_fits} posteriors "
        "(tree by model) had an R-hat above 1.01 or an effective sample size below 400 and "
        "are flagged in the tables"
        + (" (read them with care or sample longer)." if n_flagged else "."),
        "Log marginal likelihoods were estimated by bridge sampling "
        f"{cite('meng1996', 'gronau2017')} from the draws, with their Monte Carlo error, and "
        "give each model's posterior probability on each tree (equal prior probabilities "
        f"of the models); Bayes factors are read on the scale of {cite('kass1995')[1:-1]}.",
        "Across trees the posterior is summarised twice: with the trees as given (the "
        f"draws of every tree pooled with equal weight, {b['saved_draws']} per tree), the "
        "tree sample standing for the phylogenetic uncertainty; and with each tree weighted "
        "by its marginal likelihood (the joint posterior of rates and tree given the trait, "
        "the tree sample as the prior over trees), with the effective number of trees "
        "1/Σw² beside it.",
        "Model probabilities and Bayes factors depend on the prior on the rates (a wider "
        "prior lowers the marginal likelihood of a model with more rates), so they hold "
        "for the prior stated here.",
    ]
    few = few_tree_words(tables.get("bayes_model_support"))
    if few:
        out.append(few)
    return " ".join(out)


def few_tree_words(support) -> str:
    """A sentence naming the analyses whose trait-weighted summary rests on a few trees."""
    if support is None or not len(support):
        return ""
    rows = support.drop_duplicates(["analysis"])
    few = [
        f"{r['analysis']} (about {_n(r['effective_trees'])} of {int(r['n_trees'])} trees)"
        for _, r in rows.iterrows()
        if few_trees_carry(float(r["effective_trees"]), int(r["n_trees"]))
    ]
    if not few:
        return ""
    return (
        "In the trait-weighted summaries a few trees carry the weight for "
        + ", ".join(few)
        + ": those summaries describe these trees rather than the whole sample."
    )


def bayes_results(analysis: str, tables: dict) -> str:
    """One sentence per analysis on its model probabilities across trees."""
    support = tables.get("bayes_model_support")
    if support is None:
        return ""
    mine = support[support["analysis"] == analysis]
    if not len(mine):
        return ""
    top = mine.sort_values("mean_probability", ascending=False).iloc[0]
    n = int(top["n_trees"])
    text = (
        f"Bayesian estimation (tables/bayes_model_support.tsv): {top['model']} had the "
        f"highest mean posterior probability over {n} trees ({_n(top['mean_probability'])}; "
        f"most probable on {round(top['share_most_probable'] * n)} of {n} trees; "
        f"{_n(top['trait_weighted_probability'])} with the trees weighted by the trait)."
    )
    bf = mine[mine["two_log_bf_median"].notna()]
    for _, r in bf.iterrows():
        text += (
            f" 2 ln B for {r['model']} against {r['versus']}: median "
            f"{_n(r['two_log_bf_median'])} (95% of trees {_n(r['two_log_bf_low95'])} to "
            f"{_n(r['two_log_bf_high95'])}: {r['evidence']}, Kass & Raftery 1995)."
        )
    n_flag = int(mine["n_flagged"].sum())
    if n_flag:
        text += f" {n_flag} of this analysis's posteriors are flagged (R-hat or ESS)."
    return text


def bayes_warnings(run_dir) -> list:
    """The run's last words on the Bayesian stage: how many posteriors are flagged."""
    from pathlib import Path

    from ..jobs.bayes import ESS_MIN, R_HAT_MAX, read_table

    path = Path(run_dir) / "tables" / "marginal_likelihoods.tsv"
    if not path.is_file():
        return []
    ml = read_table(path)
    sampled = ml[ml["log_marginal_likelihood"].notna()]
    flagged = int(sampled["flagged"].sum())
    if not flagged:
        return []
    return [
        f"{flagged} of {len(sampled)} Bayesian posteriors are flagged (R-hat above "
        f"{R_HAT_MAX} or ESS below {ESS_MIN}): see the flagged column of {path}; raise "
        "bayes.warmup and bayes.draws before citing them."
    ]
