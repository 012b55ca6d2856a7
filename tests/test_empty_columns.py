"""Tables read back from TSV: a text column whose every cell is empty (no model repeats
another, no rate at a bound, one tree set without a name) comes back as float NaN. Every
summary, figure helper and methods sentence must read it as empty text without a pandas
deprecation warning (filling a float column with "" is deprecated and will raise)."""

from __future__ import annotations

import io

import numpy as np
import pandas as pd
import pytest

from mkforest.engine.branch_support import branch_tests, treatment_support, tree_set_support
from mkforest.engine.summarise import (
    add_weights,
    as_text,
    averaged_rates,
    model_support,
    rate_summary,
)
from mkforest.report import methods, style
from mkforest.report.methods_branches import first_set

pytestmark = pytest.mark.filterwarnings(
    "error::pandas.errors.Pandas4Warning", "error::FutureWarning"
)


def _read_back(frame: pd.DataFrame) -> pd.DataFrame:
    """As the workflow's scripts read a table: empty cells are NaN."""
    text = frame.to_csv(sep="\t", index=False)
    return pd.read_csv(io.StringIO(text), sep="\t", keep_default_na=False, na_values=[""])


def _tables():
    fits, rates = [], []
    for tree in range(3):
        for model, k, ll, branches in (("one", 1, -10.0, "as_given"), ("bent", 2, -9.0, "kappa")):
            fits.append(
                dict(
                    tree_set="trees",
                    analysis="colour",
                    model=model,
                    tree=tree,
                    n_taxa=8,
                    n_params=k,
                    log_likelihood=ll - tree,
                    aicc=-2 * (ll - tree) + 2 * k,
                    converged=True,
                    at_lower="",
                    at_upper="",
                    open_upper="",
                    branches=branches,
                    branch_parameter=0.7 if k == 2 else np.nan,
                    branch_at_bound="",
                    structure=f"0 p0 p0 0 | root uniform | branches {branches}",
                    same_as="",
                )
            )
            for a, b in (("red", "blue"), ("blue", "red")):
                rates.append(
                    dict(
                        tree_set="trees",
                        analysis="colour",
                        model=model,
                        tree=tree,
                        from_state=a,
                        to_state=b,
                        rate=0.5 + tree,
                        parameter="rate",
                        at_bound="",
                    )
                )
    return _read_back(pd.DataFrame(fits)), _read_back(pd.DataFrame(rates))


def test_all_empty_text_columns_come_back_as_floats():
    fits, rates = _tables()
    for col in ("same_as", "at_lower", "at_upper", "open_upper", "branch_at_bound"):
        assert fits[col].dtype == float, col
    assert rates["at_bound"].dtype == float
    assert as_text(fits["same_as"]).eq("").all() and as_text(pd.Series([np.nan, "a"])).tolist() == [
        "",
        "a",
    ]


def test_summaries_read_empty_text_columns_without_warnings():
    fits, rates = _tables()
    weighted = add_weights(fits)
    support = model_support(weighted)
    assert support["caution"].str.contains("only 3 trees").all()
    summary = rate_summary(rates, averaged_rates(weighted, rates))
    assert (summary["status"] == "estimated").all() and (summary["n_trees"] == 3).all()
    assert len(treatment_support(weighted)) == 2
    tests, _ = branch_tests(weighted)
    assert len(tests) == 3
    assert len(tree_set_support(weighted)) >= 0


def test_report_helpers_read_empty_text_columns_without_warnings():
    fits, rates = _tables()
    support = _read_back(model_support(add_weights(fits)).assign(same_as=""))
    assert support["same_as"].dtype == float
    assert style.same_as(support, "colour") == {}
    assert (style.rate_intervals(rates)["n_free"] == 3).all()
    assert len(first_set(fits)) == len(fits)
    unnamed = _read_back(fits.assign(tree_set=""))  # a table without set names
    assert unnamed["tree_set"].dtype == float and len(first_set(unnamed)) == len(fits)
    summary = rate_summary(rates, averaged_rates(add_weights(fits), rates))
    text = methods.analysis_results("colour", support, summary, "AICc")
    assert text.startswith("Across the 3 trees")
