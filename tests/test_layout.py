"""How the work is laid out: trees per job (trees.per_job: auto), the cluster
request check, and reading chunk files. The project's own rules; no outside value."""

import numpy as np
import pytest
from conftest import random_newick

from mkforest.data.trees import load_trees, parse_newick, save_trees
from mkforest.jobs.cluster import group_request, parse_sinfo, request_problem
from mkforest.jobs.prepare import AUTO_MAX_TREE_TIPS, AUTO_MIN_TREES, auto_trees_per_job


def jobs(n_trees, per_job, fits_per_tree):
    return fits_per_tree * -(-n_trees // per_job)


def test_auto_one_job_per_fit_when_they_fill_the_cores():
    # 500 trees x 4 fits per tree on 2 cores: 4 jobs of 500 trees
    assert auto_trees_per_job(500, 150, 4, 2) == 500
    # few fits per tree, many cores: split the trees so that every core has work
    per_job = auto_trees_per_job(4000, 100, 2, 8)
    assert per_job == 500 and jobs(4000, per_job, 2) == 16


def test_auto_job_count_does_not_grow_with_trees_below_the_memory_cap():
    counts = {n: jobs(n, auto_trees_per_job(n, 100, 6, 4), 6) for n in (300, 1000, 5000, 10_000)}
    assert len(set(counts.values())) == 1, counts


def test_auto_bounds():
    assert auto_trees_per_job(100, 50, 1, 64) == 100  # never below the trees there are
    assert auto_trees_per_job(10_000, 50, 1, 64) == AUTO_MIN_TREES
    assert auto_trees_per_job(50_000, 1000, 250, 2) == AUTO_MAX_TREE_TIPS // 1000
    assert auto_trees_per_job(3, 10_000_000, 1, 1) == 1


def test_group_request_within_node_size():
    assert group_request(20, 2, 1000) == (2, 2000)
    assert group_request(20, None, 1000) == (20, 20000)
    assert group_request(3, 32, 1000, other_mem_mb=4000) == (3, 4000)


def test_request_larger_than_every_node_is_named():
    nodes = parse_sinfo("2 3900\n4 7800\n")
    assert nodes == [(2, 3900), (4, 7800)]
    assert request_problem(4, 4000, nodes, 20, 4) is None
    msg = request_problem(20, 20000, nodes, 20, None)
    assert "20 cores" in msg and "largest node has 4 cores and 7800 MB" in msg
    assert "profiles/slurm/config.yaml" in msg and "cores:" in msg
    # cores fit, memory does not
    assert "7800 MB" in request_problem(4, 9000, nodes, 4, 4)


@pytest.mark.parametrize("n_trees", [1, 7])
def test_chunk_file_round_trip(tmp_path, n_trees):
    rng = np.random.default_rng(n_trees)
    trees = [
        parse_newick(random_newick(rng, int(rng.integers(2, 30))), index=5 + i)
        for i in range(n_trees)
    ]
    save_trees(tmp_path / "c.npz", trees)
    back = load_trees(tmp_path / "c.npz")
    assert len(back) == n_trees
    for a, b in zip(trees, back):
        assert a.tip_labels == b.tip_labels and a.index == b.index
        for name in ("parent", "length", "child_ptr", "children"):
            np.testing.assert_array_equal(getattr(a, name), getattr(b, name))
