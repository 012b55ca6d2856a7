"""The shape of the workflow's jobs: the slice of the config each job is handed (its
``params``), and the order in which fit jobs start.

Snakemake reruns a job when its parameters change; passing the whole config would
rerun every fit whenever any model or trait is added. So a job's params hold only
what that job reads. The config here is the schema-filled one (``check_config``).
"""

from __future__ import annotations

from ..data.config import trait_models
from ..engine.models import KIND_TABLE
from .analyses import hidden_classes, model_treatment

# A pair fits joint models of four or more states (relative CPU, as the kinds' costs).
PAIR_COST = 30


def fit_job_config(config: dict, analysis: str, model: str) -> dict:
    """A reduced config holding only what one fit job (analysis x model) reads."""
    tcfg = config["traits"]
    job = {
        "analysis": analysis,
        "model": model,
        "seed": config["seed"],
        "fitting": config["fitting"],
        "traits": {"columns": [], "absent_taxa": tcfg["absent_taxa"]},
        "models": {},
        "pairs": {},
    }
    if analysis in tcfg["columns"]:
        job["traits"]["columns"] = [analysis]
        job["models"] = {model: config["models"][model]}
    else:
        job["pairs"] = {analysis: config["pairs"][analysis]}
    return job


def ancestral_job_config(config: dict, analysis: str) -> dict:
    """A reduced config holding only what one ancestral job (one analysis) reads: its models
    (or its pair), the criterion, the seed and the ancestral settings. Changing another
    analysis's model, or a setting of another stage, leaves this job's params unchanged."""
    tcfg = config["traits"]
    anc = config["ancestral"]
    job = {
        "analysis": analysis,
        "seed": config["seed"],
        "criterion": config["criterion"],
        "traits": {"columns": [], "absent_taxa": tcfg["absent_taxa"]},
        "models": {},
        "pairs": {},
        "ancestral": {"model": anc["model"], "maps": anc["maps"]},
    }
    if analysis in tcfg["columns"]:
        job["traits"]["columns"] = [analysis]
        job["models"] = {m: config["models"][m] for m in trait_models(config, analysis)}
    else:
        job["pairs"] = {analysis: config["pairs"][analysis]}
    return job


def fit_job_weight(config: dict, analysis: str, model: str) -> int:
    """A fit job's expected cost relative to an equal-rates fit, for the scheduler:
    the costliest jobs start first, so that no long job is left running alone at the
    end while the other cores idle (longest-first is the classic rule for spreading
    jobs over machines; Graham 1969, from memory). Only the order changes, never a result.
    The cost: the kind's (``models.KIND_TABLE``), twice with an estimated branch-length
    parameter, times R^2 with R hidden classes."""
    if analysis in config["traits"]["columns"]:
        weight = KIND_TABLE[config["models"][model]["kind"]].cost
        if model_treatment(config, model).free:
            weight *= 2
    else:
        weight = PAIR_COST
    return int(weight * hidden_classes(config, analysis, model) ** 2)


def bayes_job_config(config: dict, analysis: str, model: str) -> dict:
    """What one Bayesian job (analysis x model x chunk) reads: the fit job's slice plus the
    sampler settings (not bayes.models or enabled, so that editing those does not rerun
    the sampling of another model)."""
    job = fit_job_config(config, analysis, model)
    block = config["bayes"]
    job["bayes"] = {
        k: block[k] for k in ("chains", "warmup", "draws", "prior", "trees", "saved_draws")
    }
    return job
