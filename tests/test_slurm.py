"""Workflows run through the SLURM profile on a real one-node SLURM cluster.

Run with ``pytest -m slurm tests/test_slurm.py`` as root: the cluster comes from
Debian's packages (installed on first use) and is torn down after the module.
The real scheduler and real Snakemake runs are used, never mocks.
"""

from __future__ import annotations

import os
import textwrap
from pathlib import Path

import pytest
import yaml
from slurm_cluster import Cluster, SnakemakeRun, one_node_slurm, run_snakemake_bounded

pytestmark = pytest.mark.slurm

REPO = Path(__file__).resolve().parents[1]
SLURM_PROFILE = REPO / "profiles" / "slurm"
LAPTOP_PROFILE = REPO / "profiles" / "laptop"
REPO_SNAKEFILE = REPO / "Snakefile"


@pytest.fixture(scope="module")
def slurm_cluster(tmp_path_factory) -> Cluster:
    with one_node_slurm(tmp_path_factory.mktemp("slurm")) as cluster:
        print(
            f"\nSLURM test cluster: install {cluster.install_seconds:.1f} s, "
            f"bring-up {cluster.bringup_seconds:.1f} s"
        )
        yield cluster


def run_workflow_on_slurm(
    configfile: Path,
    workdir: Path,
    timeout: float,
    *,
    cluster: Cluster,
    snakefile: Path = REPO_SNAKEFILE,
    extra_args: tuple[str, ...] = (),
) -> SnakemakeRun:
    """Run ``snakefile`` with ``configfile`` in ``workdir`` through profiles/slurm on ``cluster``.

    The profile is used as shipped; ``extra_args`` go after it on the command line
    (e.g. ``("--slurm-init-seconds-before-status-checks", "20")`` when every job
    takes longer than the profile's first check at 10 s). Bounded by ``timeout``
    seconds, then SIGINT, so Snakemake cancels its jobs. Snakemake's output is in
    ``workdir/snakemake-slurm.log``.
    """
    workdir.mkdir(parents=True, exist_ok=True)
    args = [
        "--snakefile",
        str(snakefile),
        "--configfile",
        str(configfile),
        "--profile",
        str(SLURM_PROFILE),
        *extra_args,
    ]
    return run_snakemake_bounded(
        args, cwd=workdir, timeout=timeout, env=cluster.env, log=workdir / "snakemake-slurm.log"
    )


def run_workflow_locally(
    configfile: Path,
    workdir: Path,
    timeout: float,
    *,
    snakefile: Path = REPO_SNAKEFILE,
    extra_args: tuple[str, ...] = (),
) -> SnakemakeRun:
    """The same run through profiles/laptop, for comparison with a SLURM run."""
    workdir.mkdir(parents=True, exist_ok=True)
    env = {k: v for k, v in os.environ.items() if not k.startswith("SLURM")}
    args = [
        "--snakefile",
        str(snakefile),
        "--configfile",
        str(configfile),
        "--profile",
        str(LAPTOP_PROFILE),
        *extra_args,
    ]
    return run_snakemake_bounded(
        args, cwd=workdir, timeout=timeout, env=env, log=workdir / "snakemake-local.log"
    )


# A throwaway workflow: two parts made in parallel, then joined. Each job writes
# the SLURM job id and partition it ran under, which exist only inside SLURM jobs.
THROWAWAY_SNAKEFILE = textwrap.dedent("""
    PARTS = ["north", "south"]

    rule all:
        input: "joined.txt"

    rule part:
        output: "parts/{part}.txt"
        shell:
            "echo \\"{wildcards.part} {config[word]} $SLURM_JOB_ID $SLURM_JOB_PARTITION\\" > {output}"

    rule join:
        input: expand("parts/{part}.txt", part=PARTS)
        output: "joined.txt"
        shell:
            "cat {input} > {output}; echo \\"join - $SLURM_JOB_ID $SLURM_JOB_PARTITION\\" >> {output}"
""")

FAILING_SNAKEFILE = textwrap.dedent("""
    rule all:
        input: "never.txt"

    rule breaks:
        output: "never.txt"
        shell: "echo about to fail; exit 3"
""")


def _write_workflow(folder: Path, snakefile_text: str, word: str) -> tuple[Path, Path]:
    folder.mkdir(parents=True, exist_ok=True)
    snakefile = folder / "Snakefile"
    snakefile.write_text(snakefile_text)
    configfile = folder / "config.yaml"
    configfile.write_text(f"word: {word}\n")
    return snakefile, configfile


def test_cluster_runs_a_batch_job(slurm_cluster, tmp_path):
    out = tmp_path / "job.out"
    result = slurm_cluster.run(
        "sbatch",
        "--wait",
        "--parsable",
        f"--output={out}",
        "--wrap",
        "echo job $SLURM_JOB_ID on $SLURMD_NODENAME",
        timeout=60,
    )
    job_id = result.stdout.strip().split(";")[0]
    assert job_id.isdigit(), result.stdout
    assert out.read_text().split() == ["job", job_id, "on", slurm_cluster.node]


def test_throwaway_workflow_runs_through_slurm_profile(slurm_cluster, tmp_path):
    snakefile, configfile = _write_workflow(tmp_path / "flow", THROWAWAY_SNAKEFILE, "spruce")
    run = run_workflow_on_slurm(
        configfile, tmp_path / "run", timeout=180, cluster=slurm_cluster, snakefile=snakefile
    )
    print(f"throwaway workflow on SLURM: {run.seconds:.1f} s")
    assert not run.timed_out, f"timed out after {run.seconds:.0f} s:\n{run.output()}"
    assert run.returncode == 0, run.output()

    rows = [line.split() for line in (tmp_path / "run" / "joined.txt").read_text().splitlines()]
    assert [row[:2] for row in rows] == [["north", "spruce"], ["south", "spruce"], ["join", "-"]]
    job_ids = [row[2] for row in rows]
    # Every job ran as its own SLURM job on the test partition, not on the local machine.
    assert all(job_id.isdigit() for job_id in job_ids), rows
    assert len(set(job_ids)) == 3, rows
    assert [row[3] for row in rows] == [slurm_cluster.partition] * 3
    # Snakemake saw every job finish through squeue and left nothing queued.
    queue = slurm_cluster.run("squeue", "-h", "-t", "PD,R,CG", "-o", "%i").stdout.split()
    assert queue == []


def test_failed_job_is_reported_not_waited_on(slurm_cluster, tmp_path):
    snakefile, configfile = _write_workflow(tmp_path / "flow", FAILING_SNAKEFILE, "birch")
    run = run_workflow_on_slurm(
        configfile,
        tmp_path / "run",
        timeout=180,
        cluster=slurm_cluster,
        snakefile=snakefile,
        extra_args=("--retries", "0"),
    )
    output = run.output(200)
    assert not run.timed_out, (
        f"Snakemake did not notice the failed job in {run.seconds:.0f} s:\n{output}"
    )
    assert run.returncode != 0, output
    assert "Error in rule breaks" in output, output
    assert not (tmp_path / "run" / "never.txt").exists()


# --------------------------------------------------------------------------- real workflow

# A small config for the comparison: MKFOREST_SLURM_TEST_CONFIG if set, else config/test*.yaml.
# Relative input paths in it are read from the run's fresh work folder.
SMALL_CONFIGS = (
    [Path(os.environ["MKFOREST_SLURM_TEST_CONFIG"]).resolve()]
    if os.environ.get("MKFOREST_SLURM_TEST_CONFIG")
    else sorted((REPO / "config").glob("test*.yaml"))
)


def _first_difference(local: Path, slurm: Path) -> str:
    """The first differing line of two tables, for a readable failure message."""
    a, b = local.read_text().splitlines(), slurm.read_text().splitlines()
    header = a[0] if a else ""
    for number, (line_a, line_b) in enumerate(zip(a, b), start=1):
        if line_a != line_b:
            return f"line {number}\n  columns: {header}\n  local:   {line_a}\n  slurm:   {line_b}"
    return f"local has {len(a)} lines, slurm has {len(b)}"


@pytest.mark.skipif(
    not REPO_SNAKEFILE.exists() or not SMALL_CONFIGS,
    reason="needs the workflow's Snakefile and a small config/test*.yaml (or MKFOREST_SLURM_TEST_CONFIG)",
)
def test_slurm_run_tables_equal_local_run(slurm_cluster, tmp_path):
    """The same config run locally and through SLURM gives byte-identical tables.

    Seeds derive from (global seed, tree, analysis, model), never from job order or
    placement, so where a job runs must not change a single digit.
    """
    configfile = SMALL_CONFIGS[0]
    run_name = yaml.safe_load(configfile.read_text())["run"]
    local = run_workflow_locally(configfile, tmp_path / "local", timeout=900)
    assert local.returncode == 0 and not local.timed_out, local.output()
    slurm = run_workflow_on_slurm(
        configfile, tmp_path / "slurm", timeout=1500, cluster=slurm_cluster
    )
    print(f"real workflow: local {local.seconds:.0f} s, SLURM {slurm.seconds:.0f} s")
    assert slurm.returncode == 0 and not slurm.timed_out, slurm.output()
    assert "has been submitted with SLURM jobid" in slurm.log.read_text(), (
        "no job went through SLURM"
    )

    local_tables = tmp_path / "local" / "results" / run_name / "tables"
    slurm_tables = tmp_path / "slurm" / "results" / run_name / "tables"
    names = sorted(p.name for p in local_tables.glob("*.tsv"))
    assert names, f"the local run wrote no tables in {local_tables}"
    assert sorted(p.name for p in slurm_tables.glob("*.tsv")) == names
    for name in names:
        a, b = local_tables / name, slurm_tables / name
        assert a.read_bytes() == b.read_bytes(), f"{name} differs: {_first_difference(a, b)}"


SCAN_CONFIG = REPO / "config" / "test_small_scan.yaml"


def test_slurm_scan_tables_equal_local_run(slurm_cluster, tmp_path):
    """A small all-pairs scan through the SLURM profile: its pair jobs go through the
    scheduler and scan.tsv and scan_per_tree.tsv are byte-identical to a local run
    (a pair's seeds come from the tree and the pair, never from its job)."""
    local = run_workflow_locally(SCAN_CONFIG, tmp_path / "local", timeout=900)
    assert local.returncode == 0 and not local.timed_out, local.output()
    slurm = run_workflow_on_slurm(
        SCAN_CONFIG, tmp_path / "slurm", timeout=1500, cluster=slurm_cluster
    )
    assert slurm.returncode == 0 and not slurm.timed_out, slurm.output()
    log = slurm.log.read_text()
    assert "rule scan_pairs" in log and "has been submitted with SLURM jobid" in log
    for name in ("scan.tsv", "scan_per_tree.tsv"):
        a = tmp_path / "local" / "results" / "small_scan" / "tables" / name
        b = tmp_path / "slurm" / "results" / "small_scan" / "tables" / name
        assert a.read_bytes() == b.read_bytes(), f"{name} differs: {_first_difference(a, b)}"


@pytest.mark.skipif(not SMALL_CONFIGS, reason="needs a small config/test*.yaml")
def test_request_larger_than_every_node_stops_before_submission(slurm_cluster, tmp_path):
    """Node size set above the test node's cores: the run stops before anything is
    submitted, with one sentence naming the setting (sinfo reports the node)."""
    too_many = slurm_cluster.cpus * 8
    run = run_workflow_on_slurm(
        SMALL_CONFIGS[0],
        tmp_path / "big",
        timeout=300,
        cluster=slurm_cluster,
        extra_args=("--cores", str(too_many)),
    )
    output = run.output(200)
    assert not run.timed_out, f"timed out after {run.seconds:.0f} s:\n{output}"
    assert run.returncode != 0, output
    assert f"largest node has {slurm_cluster.cpus} cores" in output, output
    assert "profiles/slurm/config.yaml" in output and f"cores: {too_many}" in output, output
    assert "has been submitted with SLURM jobid" not in run.log.read_text()
