"""Bayesian estimation in the workflow: one sampling job per analysis x model x chunk of
trees, and one summary job that writes the tables and the draws files.

A sampling job writes three files per chunk: the per-tree posterior of every rate
(``.rates.tsv``, keyed like rates.tsv), the marginal likelihood of every tree
(``.ml.tsv``) and the kept draws (``.draws.npz``, a fixed number per tree, evenly
thinned within each chain). The summary job pools them across trees
(``engine.posterior_pooling``) and writes one ArviZ file per analysis.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..data.traits import with_written_names
from ..engine.bayes import ESS_MIN, R_HAT_MAX  # the package top imports no sampler
from ..engine.treatments import Treatment
from ..seeds import derive_seed

POSTERIOR_COLUMNS = [
    "tree_set",
    "analysis",
    "model",
    "tree",
    "from_state",
    "to_state",
    "parameter",
    "mean",
    "median",
    "low95",
    "high95",
    "ess_bulk",
    "ess_tail",
    "r_hat",
    "flag",
]
ML_COLUMNS = [
    "tree_set",
    "analysis",
    "model",
    "tree",
    "n_params",
    "log_marginal_likelihood",
    "mc_error",
    "method",
    "flagged",
    "r_hat_max",
    "ess_min",
    "note",
]


def parameter_flag(r_hat: float, ess_bulk: float, ess_tail: float) -> str:
    """Why one parameter's posterior is not to be trusted yet ('' when it is)."""
    out = []
    if not r_hat <= R_HAT_MAX:
        out.append(f"r_hat above {R_HAT_MAX}")
    if not ess_bulk >= ESS_MIN:
        out.append(f"ess_bulk below {ESS_MIN}")
    if not ess_tail >= ESS_MIN:
        out.append(f"ess_tail below {ESS_MIN}")
    return ", ".join(out)


def saved_per_chain(saved_draws: int, chains: int, draws: int) -> int:
    """Draws kept per chain for the draws file: saved_draws shared by the chains (rounded
    down), at most every draw."""
    return max(1, min(draws, saved_draws // chains))


def thin_draws(array: np.ndarray, per_chain: int) -> np.ndarray:
    """[chains, draws, ...] -> [chains, per_chain, ...]: draws evenly spaced in each chain."""
    idx = np.round(np.linspace(0, array.shape[1] - 1, per_chain)).astype(int)
    return array[:, idx]


def posterior_rows(post, model, treatment: Treatment, keys: dict) -> list:
    """One row per change with a free rate (as in rates.tsv), and one for an estimated
    branch-length parameter (named after its treatment, no states)."""
    n_chains, n_draws, _ = post.draws.shape
    flat = post.draws.reshape(n_chains * n_draws, -1)
    summaries = []
    for p in range(flat.shape[1]):
        x = flat[:, p]
        lo, med, hi = np.quantile(x, (0.025, 0.5, 0.975))
        summaries.append(
            {
                "mean": float(np.mean(x)),
                "median": float(med),
                "low95": float(lo),
                "high95": float(hi),
                "ess_bulk": float(post.ess_bulk[p]),
                "ess_tail": float(post.ess_tail[p]),
                "r_hat": float(post.r_hat[p]),
                "flag": parameter_flag(post.r_hat[p], post.ess_bulk[p], post.ess_tail[p]),
            }
        )
    rows = []
    for a, b, p in model.transitions():
        if p < 0:
            continue  # fixed or forbidden: no posterior
        rows.append(
            {**keys, "from_state": a, "to_state": b, "parameter": model.labels[p], **summaries[p]}
        )
    if len(post.labels) > model.n_params:
        rows.append(
            {
                **keys,
                "from_state": "",
                "to_state": "",
                "parameter": treatment.name,
                **summaries[model.n_params],
            }
        )
    return rows


def bayes_chunk(
    trees: list,
    trait,
    model,
    root: str,
    analysis: str,
    seed: int,
    settings: dict,
    absent: str = "error",
    branches: Treatment | None = None,
    sample=None,
) -> tuple:
    """Sample the posterior of one model on each tree of ``trees``. Returns (rate rows, marginal-likelihood rows, saved draws):
    saved draws is {tree, tree_set, labels, draws [trees, chains, kept, params],
    log_likelihood [trees, chains, kept]}, NaN for a tree not sampled.

    ``sample`` defaults to the engine's ``sample_posterior`` with the prior parsed from
    ``settings['prior']``; a stand-in sampler (tests of the tables) gets the block as
    written."""
    if sample is None:
        from ..engine.bayes import Prior
        from ..engine.bayes import sample_posterior as sample

        prior = Prior.from_config(settings["prior"], "bayes.prior")
    else:
        prior = settings["prior"]
    treatment = branches or Treatment()
    chains, draws = settings["chains"], settings["draws"]
    per_chain = saved_per_chain(settings["saved_draws"], chains, draws)
    labels = list(model.labels) + ([treatment.name] if treatment.n_params else [])
    varies = len(trait.observed_states()) >= 2
    rate_rows, ml_rows = [], []
    saved = np.full((len(trees), chains, per_chain, len(labels)), np.nan)
    saved_ll = np.full((len(trees), chains, per_chain), np.nan)
    for t, tree in enumerate(trees):
        keys = {"tree_set": tree.tree_set, "analysis": analysis, "model": model.name}
        keys["tree"] = tree.index
        row = {**keys, "n_params": len(labels), "method": "", "flagged": False}
        if not varies:
            ml_rows.append(
                {
                    **row,
                    "log_marginal_likelihood": np.nan,
                    "mc_error": np.nan,
                    "r_hat_max": np.nan,
                    "ess_min": np.nan,
                    "note": "not sampled: fewer than two observed states",
                }
            )
            continue
        post = sample(
            tree,
            trait.tip_partials(tree, absent=absent),
            model,
            root=root,
            branches=treatment,
            prior=prior,
            chains=chains,
            warmup=settings["warmup"],
            draws=draws,
            seed=derive_seed(seed, tree.index, analysis, model.name, "bayes"),
        )
        rate_rows += posterior_rows(post, model, treatment, keys)
        ess = np.minimum(post.ess_bulk, post.ess_tail)
        ml_rows.append(
            {
                **row,
                "log_marginal_likelihood": float(post.log_marginal_likelihood),
                "mc_error": float(post.mc_error),
                "method": post.method,
                "flagged": bool(post.flagged),
                "r_hat_max": float(np.max(post.r_hat)),
                "ess_min": float(np.min(ess)),
                "note": "; ".join(post.notes),
            }
        )
        saved[t] = thin_draws(np.asarray(post.draws, float), per_chain)
        saved_ll[t] = thin_draws(np.asarray(post.log_likelihood, float), per_chain)
    kept = {
        "tree": np.array([t.index for t in trees], dtype=np.int64),
        "tree_set": np.array([t.tree_set for t in trees], dtype=str),
        "labels": np.array(labels, dtype=str),
        "draws": saved,
        "log_likelihood": saved_ll,
    }
    return rate_rows, ml_rows, kept


# ---- the summary job: tables across trees and the draws files -------------------

SUMMARY_COLUMNS = [
    "tree_set",
    "analysis",
    "model",
    "parameter",
    "changes",
    "summary",
    "median",
    "low95",
    "high95",
    "n_trees",
    "n_flagged",
    "effective_trees",
    "caution",
]
SUPPORT_COLUMNS = [
    "tree_set",
    "analysis",
    "model",
    "n_trees",
    "n_flagged",
    "mean_probability",
    "share_most_probable",
    "trait_weighted_probability",
    "effective_trees",
    "versus",
    "two_log_bf_median",
    "two_log_bf_low95",
    "two_log_bf_high95",
    "evidence",
    "caution",
]
ML_TABLE_COLUMNS = (
    ML_COLUMNS[:8] + ["posterior_probability", "versus", "two_log_bf"] + ML_COLUMNS[8:]
)
AS_GIVEN, TRAIT_WEIGHTED = "trees_as_given", "trait_weighted"
# The null every pair hypothesis is compared with by a Bayes factor.
PAIR_NULL = "independent"


def few_trees_carry(effective: float, n: int) -> bool:
    """True when the trait-weighted summary rests on a few trees: an effective number of
    trees below max(2, n / 10) (a rule of this project, not a published threshold)."""
    return bool(np.isfinite(effective) and n > 1 and effective < max(2.0, 0.1 * n))


def merge_kept(parts: list) -> dict:
    """Saved draws of one analysis x model from its chunks, trees in chunk order."""
    parts = [p for p in parts if len(p["tree"])]
    if not parts:
        return {}
    return {
        "tree": np.concatenate([p["tree"] for p in parts]),
        "tree_set": np.concatenate([p["tree_set"] for p in parts]),
        "labels": [str(x) for x in parts[0]["labels"]],
        "draws": np.concatenate([p["draws"] for p in parts]),
        "log_likelihood": np.concatenate([p["log_likelihood"] for p in parts]),
    }


def _cautions(n_flagged: int, n: int, effective: float | None) -> str:
    out = []
    if n_flagged:
        out.append(
            f"{n_flagged} of {n} trees' posteriors flagged (R-hat above {R_HAT_MAX} or ESS "
            f"below {ESS_MIN}): see tables/posterior_rates.tsv"
        )
    if effective is not None and few_trees_carry(effective, n):
        out.append(f"the trait-weighted summary rests on about {effective:.1f} of {n} trees")
    if n < 10:
        out.append(f"only {n} trees")
    return "; ".join(out)


def marginal_table(ml, pairs=()) -> object:
    """tables/marginal_likelihoods.tsv from the chunks' rows: posterior probability of
    each model among the analysis's sampled models on its tree (equal prior), and for a
    pair hypothesis 2 ln B against the independent hypothesis on the same tree."""
    import pandas as pd

    from ..engine.posterior_pooling import model_probabilities

    ml = ml.copy()
    ml["posterior_probability"] = np.nan
    ml["versus"] = ""
    ml["two_log_bf"] = np.nan
    for _, group in ml.groupby(["tree_set", "analysis", "tree"], sort=False):
        probs = model_probabilities(group["log_marginal_likelihood"].to_numpy()[None, :])[0]
        ml.loc[group.index, "posterior_probability"] = probs
        analysis = group["analysis"].iloc[0]
        null = group[group["model"] == PAIR_NULL]
        if analysis in pairs and len(null):
            others = group[group["model"] != PAIR_NULL]
            ml.loc[others.index, "versus"] = PAIR_NULL
            ml.loc[others.index, "two_log_bf"] = 2 * (
                others["log_marginal_likelihood"] - float(null["log_marginal_likelihood"].iloc[0])
            )
    return pd.DataFrame(ml, columns=ML_TABLE_COLUMNS)


def support_table(ml, order: dict) -> object:
    """tables/bayes_model_support.tsv: per analysis x model, across trees."""
    import pandas as pd

    from ..engine.posterior_pooling import (
        effective_trees,
        evidence_words,
        tree_weights,
        weighted_model_probabilities,
    )

    rows = []
    for (tree_set, analysis), group in ml.groupby(["tree_set", "analysis"], sort=False):
        models = [m for m in order.get(analysis, []) if m in set(group["model"])]
        wide = group.pivot(index="tree", columns="model", values="log_marginal_likelihood")
        wide = wide[models]
        complete = wide.dropna()
        probs = group.pivot(index="tree", columns="model", values="posterior_probability")
        probs = probs.loc[complete.index, models]
        best = probs.to_numpy().argmax(axis=1) if len(probs) else np.array([], int)
        weighted = weighted_model_probabilities(complete.to_numpy())
        joint = complete.to_numpy()
        if len(joint):
            top = joint.max(axis=1, keepdims=True)
            per_tree = top[:, 0] + np.log(np.exp(joint - top).sum(axis=1))
            eff = effective_trees(tree_weights(per_tree))
        else:
            eff = float("nan")
        for i, model in enumerate(models):
            mine = group[group["model"] == model]
            n = len(complete)
            flagged = int(mine[mine["tree"].isin(complete.index)]["flagged"].astype(bool).sum())
            bf = mine["two_log_bf"].dropna().to_numpy()
            lo, med, hi = np.quantile(bf, (0.025, 0.5, 0.975)) if len(bf) else [np.nan] * 3
            rows.append(
                {
                    "tree_set": tree_set,
                    "analysis": analysis,
                    "model": model,
                    "n_trees": n,
                    "n_flagged": flagged,
                    "mean_probability": float(probs[model].mean()) if n else np.nan,
                    "share_most_probable": float(np.mean(best == i)) if n else np.nan,
                    "trait_weighted_probability": float(weighted[i]),
                    "effective_trees": eff,
                    "versus": mine["versus"].iloc[0] if len(bf) else "",
                    "two_log_bf_median": med,
                    "two_log_bf_low95": lo,
                    "two_log_bf_high95": hi,
                    "evidence": evidence_words(med) if len(bf) else "",
                    "caution": _cautions(flagged, n, eff),
                }
            )
    return pd.DataFrame(rows, columns=SUPPORT_COLUMNS)


def summary_table(rates, ml, kept: dict) -> object:
    """tables/posterior_summary.tsv: per analysis x model x parameter, the two summaries
    across trees from the saved draws (kept: {(analysis, model): merge_kept(...)})."""
    import pandas as pd

    from ..engine.posterior_pooling import (
        effective_trees,
        pooled_quantiles,
        trait_weighted_quantiles,
        tree_weights,
    )

    rows = []
    for (analysis, model), k in kept.items():
        if not k:
            continue
        mine = ml[(ml["analysis"] == analysis) & (ml["model"] == model)]
        for tree_set in dict.fromkeys(k["tree_set"]):
            at = k["tree_set"] == tree_set
            trees = k["tree"][at]
            sampled = np.isfinite(k["draws"][at]).all(axis=(1, 2, 3))
            by_tree = mine[mine["tree_set"] == tree_set].set_index("tree")
            log_ml = by_tree["log_marginal_likelihood"].reindex(trees).to_numpy(float)
            log_ml = np.where(sampled, log_ml, np.nan)
            flagged = by_tree["flagged"].reindex(trees).fillna(False).astype(bool).to_numpy()
            n, n_flagged = int(sampled.sum()), int((flagged & sampled).sum())
            eff = effective_trees(tree_weights(log_ml))
            changes = _changes(rates, tree_set, analysis, model)
            for p, label in enumerate(k["labels"]):
                per_tree = [d[..., p] for d, ok in zip(k["draws"][at], sampled) if ok]
                for summary, qs, e in (
                    (AS_GIVEN, pooled_quantiles(per_tree), float(n)),
                    (
                        TRAIT_WEIGHTED,
                        trait_weighted_quantiles(per_tree, log_ml[sampled]),
                        eff,
                    ),
                ):
                    rows.append(
                        {
                            "tree_set": tree_set,
                            "analysis": analysis,
                            "model": model,
                            "parameter": label,
                            "changes": changes.get(label, ""),
                            "summary": summary,
                            "median": qs[1],
                            "low95": qs[0],
                            "high95": qs[2],
                            "n_trees": n,
                            "n_flagged": n_flagged,
                            "effective_trees": e,
                            "caution": _cautions(
                                n_flagged, n, e if summary == TRAIT_WEIGHTED else None
                            ),
                        }
                    )
    return pd.DataFrame(rows, columns=SUMMARY_COLUMNS)


def _changes(rates, tree_set, analysis, model) -> dict:
    """{parameter: 'a->b, b->a'} from the posterior_rates rows of one model."""
    mine = rates[
        (rates["tree_set"] == tree_set)
        & (rates["analysis"] == analysis)
        & (rates["model"] == model)
    ]
    mine = mine[mine["from_state"].astype(str) != ""].drop_duplicates(
        ["parameter", "from_state", "to_state"]
    )
    out: dict = {}
    for r in mine.itertuples():
        out.setdefault(r.parameter, []).append(f"{r.from_state}->{r.to_state}")
    return {p: ", ".join(v) for p, v in out.items()}


def draws_dataset(kept: dict, analysis: str, models: list, settings: dict):
    """One analysis's saved draws as ArviZ InferenceData: in the posterior group one
    variable per model and parameter, named 'model:parameter', [chain, draw, tree]
    (chains within a tree; the same number of draws for every tree), and each model's
    log-likelihood in sample_stats as 'model:log_likelihood'. Rates are per unit of
    branch length (as in rates.tsv)."""
    import arviz as az

    posterior, stats, trees = {}, {}, None
    attrs = {}
    for model in models:
        k = kept.get((analysis, model))
        if not k:
            continue
        if trees is None:
            trees = k["tree"]
        at = {int(t): i for i, t in enumerate(k["tree"])}
        pick = [at[int(t)] for t in trees]
        for p, label in enumerate(k["labels"]):
            name = f"{model}:{label}"
            posterior[name] = np.moveaxis(k["draws"][pick][..., p], 0, -1)
            attrs[name] = {"model": model, "parameter": label}
        stats[f"{model}:log_likelihood"] = np.moveaxis(k["log_likelihood"][pick], 0, -1)
    if trees is None:
        return None
    dims = {name: ["tree"] for name in list(posterior) + list(stats)}
    data = az.from_dict(
        posterior=posterior,
        sample_stats=stats,
        coords={"tree": [int(t) for t in trees]},
        dims=dims,
        attrs={
            "analysis": analysis,
            "prior": repr(settings["prior"]),
            "units": "rates per unit of branch length, as in tables/rates.tsv",
            "chains_per_tree": settings["chains"],
            "warmup": settings["warmup"],
            "draws_per_chain_sampled": settings["draws"],
            "tree_set": str(kept[(analysis, models[0])]["tree_set"][0])
            if kept.get((analysis, models[0]))
            else "",
        },
    )
    for name, a in attrs.items():
        data.posterior[name].attrs.update(a)
    return data


def read_rows(paths: list, columns: list):
    """Concatenated chunk tables; states, models and notes stay text."""
    import pandas as pd

    from ..engine.summarise import as_text

    text = {c: str for c in ("analysis", "model", "tree_set", "from_state", "to_state")}
    text.update({c: str for c in ("parameter", "flag", "method", "note", "versus", "changes")})
    frames = [
        pd.read_csv(p, sep="\t", dtype=text, keep_default_na=False, na_values=["", "nan", "NaN"])
        for p in paths
    ]
    frames = [f for f in frames if len(f)]
    if not frames:
        return pd.DataFrame(columns=columns)
    out = pd.concat(frames, ignore_index=True)
    for c in ("from_state", "to_state", "flag", "method", "note", "versus", "changes"):
        if c in out:
            out[c] = as_text(out[c])
    for c in ("evidence", "caution"):
        if c in out:
            out[c] = as_text(out[c])
    if "flagged" in out:
        out["flagged"] = out["flagged"].astype(str).str.lower() == "true"
    return out


def write_summary(
    rates, mls, draws, analyses: dict, pairs, settings: dict, out, names: dict | None = None
) -> None:
    """Every Bayesian table and the draws files (one per analysis, in ``analyses`` order);
    names: {analysed name: header as written} for the tables' ``_as_written`` columns."""
    rate_table = read_rows(rates, POSTERIOR_COLUMNS)
    ml = read_rows(mls, ML_COLUMNS)
    parts: dict = {}
    for path in draws:
        with np.load(path) as z:
            part = {k: z[k] for k in z.files}
        key = (Path(path).parent.parent.name, Path(path).parent.name)
        parts.setdefault(key, []).append(part)
    kept = {key: merge_kept(v) for key, v in parts.items()}
    ml_table = marginal_table(ml, set(pairs))
    names = names or {}
    for table, path in (
        (rate_table, out.posterior_rates),
        (ml_table, out.marginal),
        (summary_table(rate_table, ml_table, kept), out.summary),
        (support_table(ml_table, analyses), out.support),
    ):
        with_written_names(table, names).to_csv(path, sep="\t", index=False)
    for analysis, path in zip(analyses, out.draws):
        data = draws_dataset(kept, analysis, analyses[analysis], settings)
        data.to_netcdf(path)


def read_table(path):
    """One of the stage's tables, text columns as text."""
    return read_rows([path], [])


def pooled_from_file(path) -> dict:
    """{(model, parameter): every tree's saved draws pooled} from one analysis's draws file
    (the first tree set's, the only one sampled). Trees never sampled are NaN and dropped."""
    import arviz as az

    data = az.from_netcdf(path)
    out = {}
    for var in data.posterior.data_vars.values():
        values = np.asarray(var.values, float).ravel()
        out[(var.attrs["model"], var.attrs["parameter"])] = values[np.isfinite(values)]
    return out
