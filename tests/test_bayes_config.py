"""The bayes block of the config: defaults, and mistakes named by their key."""

from __future__ import annotations

import pytest
import yaml
from workflow_helpers import REPO

from mkforest.data.config import bayes_analyses, validate_config
from mkforest.errors import InputError
from mkforest.jobs.shaping import bayes_job_config


def config(**bayes):
    raw = yaml.safe_load((REPO / "config" / "template.yaml").read_text())
    raw["bayes"] = bayes
    return raw


def test_defaults():
    c = validate_config(config())
    assert c["bayes"]["enabled"] is False and bayes_analyses(c) == {}
    assert c["bayes"]["prior"] == {"exponential": {"mean": 1.0}}
    assert (c["bayes"]["chains"], c["bayes"]["warmup"], c["bayes"]["draws"]) == (4, 500, 500)


def test_models_filter_and_job_slice():
    c = validate_config(config(enabled=True, models=["one_rate", "dependent"]))
    assert bayes_analyses(c) == {
        "colour": ["one_rate"],
        "size": ["one_rate"],
        "colour_size": ["dependent"],
    }
    job = bayes_job_config(c, "size", "one_rate")
    assert set(job["bayes"]) == {"chains", "warmup", "draws", "prior", "trees", "saved_draws"}
    assert job["models"] == {"one_rate": c["models"]["one_rate"]}


@pytest.mark.parametrize(
    "block, words",
    [
        ({"prior": {"gamma": {"mean": 1}}}, "bayes.prior.gamma needs exactly shape, mean"),
        ({"prior": {"gama": {"mean": 1}}}, "'gama' is not a prior"),
        ({"prior": {"exponential": {"mean": -1}}}, "bayes.prior.exponential.mean is -1"),
        (
            {"prior": {"log_uniform": {"lower": 5, "upper": 1}}},
            "bayes.prior.log_uniform: lower (5) must be below upper (1)",
        ),
        ({"prior": {"exponential": {"mean": 1}, "gamma": {}}}, "bayes.prior must name one"),
        ({"models": ["one_rat"]}, "bayes.models names 'one_rat'"),
        ({"chains": 1}, "bayes.chains"),
        ({"sampler": "x"}, "key 'bayes.sampler' is not a known key"),
    ],
)
def test_mistakes_name_the_key(block, words):
    with pytest.raises(InputError) as err:
        validate_config(config(enabled=True, **block), "config file 'c.yaml'")
    assert words in str(err.value)
    assert "Traceback" not in str(err.value)
