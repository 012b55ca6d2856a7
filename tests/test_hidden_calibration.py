"""Small versions of benchmarks/hidden_classes.py (the full runs and their figures are
in docs/validation.md): a two-speed trait and a pair of independent traits with a one-clade
burst. The checks are the nesting facts every data set must satisfy (a fit may not
beat a model that contains it: the plain model is the two-class model with equal
classes; independent-with-classes sits inside dependent-with-classes), the ordering
of the recovered classes, and that the simulated scenario is the one described.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "benchmarks"))

import hidden_classes as bench  # noqa: E402

pytestmark = pytest.mark.slow  # ~1-3 minutes


def test_recovery_small():
    report, rows = bench.run("recovery", 8, 1, 2026, 10.0)
    assert len(rows) == 8
    for r in rows:
        # the two-class model contains the plain unconstrained one: its weight can only be
        # below by the AICc penalty of 3 extra rates; fast class faster than the slow one
        equal, plain, two = r["log_likelihoods"]
        assert two >= plain - 1e-3 and plain >= equal - 1e-3
        rates = r["rates"]
        assert rates["0->1@2"] + rates["1->0@2"] >= rates["0->1@1"] + rates["1->0@1"]
    assert (
        report["best_counts"]["two_classes"]
        + report["best_counts"]["unconstrained"]
        + report["best_counts"]["equal"]
        == 8
    )
    print(report)


def test_burst_calibration_small():
    report, rows = bench.run("calibration", 6, 1, 2026, 10.0)
    assert 20 <= report["clade_size"] <= 35 and report["df"] == [4, 8]
    for r in rows:
        for kind in ("plain", "hidden"):
            assert r[kind]["statistic"] >= 0.0 and 0.0 <= r[kind]["p"] <= 1.0
        # the plain independent model is the independent model with two equal classes
        assert r["hidden"]["null_log_likelihood"] >= r["plain"]["null_log_likelihood"] - 1e-3
    print(report)


def test_burst_tree_lengthens_one_clade_only():
    tree = bench.pure_birth(100, 5)
    fast, size = bench.burst_tree(tree, factor=10.0)
    changed = fast.length != tree.length
    assert 20 <= size <= 35
    np.testing.assert_allclose(fast.length[changed], 10.0 * tree.length[changed])
    # the lengthened branches are exactly the clade's: 2 * size - 1 branches (binary tree)
    assert int(changed.sum()) == 2 * size - 1
