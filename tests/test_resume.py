"""A run stopped during fitting and started again completes, with the tables of an
uninterrupted run; a half-written file left by a kill is never taken for a finished one.

Two ways of stopping: Ctrl-C (SIGINT to the whole foreground process group), after which
Snakemake cleans up and the same command simply resumes; and SIGKILL to the whole process
group, as a power cut or a killed session leaves things. After a hard kill Snakemake
first asks for ``snakemake --unlock`` (its lock on the working directory was left
behind). Snakemake's own incomplete-file check does not reach jobs that depend on a
checkpoint (nearly all of ours), so job outputs take their final names only when
complete (mkforest.jobs.scripting.run_job); the first test shows it on a workflow built to
die in the middle of writing a file.
"""

from __future__ import annotations

import os
import signal
import subprocess
import time
from pathlib import Path

import pytest
from provenance_runs import RUN, base_config, finished_run, mkforest, prepare_workdir
from workflow_helpers import REPO, SNAKEMAKE, run_snakemake

LAPTOP = REPO / "profiles" / "laptop"


KILLER = """
def parts(wildcards):
    folder = checkpoints.split.get().output[0]
    return expand("out/{p}.b.tsv", p=glob_wildcards(folder + "/{p,p[0-9]+}").p)


rule all:
    input:
        parts,


checkpoint split:
    output:
        directory("parts"),
    shell:
        "mkdir -p parts && touch parts/p1 parts/p2"


rule write:
    input:
        "parts/{p}",
    output:
        "out/{p}.a.tsv",
        "out/{p}.b.tsv",
    log:
        "logs/{p}.log",
    script:
        "write.py"
"""

WRITER = """
import os, signal, sys
sys.path.insert(0, {repo!r})
from mkforest.jobs.scripting import run_job


def main(smk):
    with open(smk.output[0], "w") as fh:
        fh.write("x\\t1\\n" * 100)
    with open(smk.output[1], "w") as fh:
        fh.write("x\\t1\\n" * 50)
        fh.flush()
        if os.environ.get("DIE_MIDWAY") and smk.wildcards.p == "p1":
            os.killpg(0, signal.SIGKILL)      # the whole run dies in the middle of a write
        if os.environ.get("FAIL_MIDWAY") and smk.wildcards.p == "p1":
            raise RuntimeError("a bug in the middle of a write")
        fh.write("x\\t1\\n" * 50)


run_job(snakemake, main)
"""


def test_a_job_killed_mid_write_leaves_no_file_under_an_output_name(tmp_path):
    (tmp_path / "Snakefile").write_text(KILLER)
    (tmp_path / "write.py").write_text(WRITER.format(repo=str(REPO)))
    cmd = [
        SNAKEMAKE,
        "--snakefile",
        str(tmp_path / "Snakefile"),
        "--cores",
        "1",
        "--directory",
        str(tmp_path),
    ]
    env = dict(os.environ, PYTHONPATH=str(REPO), DIE_MIDWAY="1")
    died = subprocess.run(
        cmd, env=env, capture_output=True, text=True, timeout=300, start_new_session=True
    )
    assert died.returncode == -signal.SIGKILL
    out = tmp_path / "out"
    assert not (out / "p1.a.tsv").exists() and not (out / "p1.b.tsv").exists()
    half = list(out.glob(".mkforest-writing-*/p1.b.tsv"))
    assert len(half) == 1 and len(half[0].read_text().splitlines()) == 50  # it died mid-write
    env.pop("DIE_MIDWAY")
    for extra in (["--unlock"], []):
        proc = subprocess.run(cmd + extra, env=env, capture_output=True, text=True, timeout=300)
        assert proc.returncode == 0, proc.stderr[-3000:]
    for p in ("p1", "p2"):
        assert len((out / f"{p}.a.tsv").read_text().splitlines()) == 100
        assert len((out / f"{p}.b.tsv").read_text().splitlines()) == 100


def test_a_failing_job_leaves_neither_output_nor_staging_folder(tmp_path):
    (tmp_path / "Snakefile").write_text(KILLER)
    (tmp_path / "write.py").write_text(WRITER.format(repo=str(REPO)))
    cmd = [
        SNAKEMAKE,
        "--snakefile",
        str(tmp_path / "Snakefile"),
        "--cores",
        "1",
        "--directory",
        str(tmp_path),
        "--keep-going",
    ]
    env = dict(os.environ, PYTHONPATH=str(REPO), FAIL_MIDWAY="1")
    failed = subprocess.run(cmd, env=env, capture_output=True, text=True, timeout=300)
    assert failed.returncode != 0 and "a bug in the middle of a write" in failed.stderr
    out = tmp_path / "out"
    assert sorted(p.name for p in out.iterdir()) == ["p2.a.tsv", "p2.b.tsv"]


def fit_jobs(out: Path) -> tuple:
    """(started, finished) fit outputs: a job's log appears when it starts, its table when it ends."""
    started = (
        {
            p.relative_to(out / "logs" / "fit").with_suffix("").as_posix()
            for p in (out / "logs" / "fit").rglob("chunk_*.log")
        }
        if (out / "logs" / "fit").is_dir()
        else set()
    )
    finished = (
        {
            p.relative_to(out / "fits").as_posix().removesuffix(".fits.tsv")
            for p in (out / "fits").rglob("chunk_*.fits.tsv")
        }
        if (out / "fits").is_dir()
        else set()
    )
    return started, finished


def stop_during_fitting(work: Path, cfg: Path, sig, timeout: float = 600) -> set:
    """Start the workflow and send ``sig`` to its process group while a fit job runs after
    another has finished; returns the fit jobs that were running then."""
    out = work / "results" / RUN
    cmd = [
        SNAKEMAKE,
        "--snakefile",
        str(REPO / "Snakefile"),
        "--directory",
        str(work),
        "--configfile",
        str(cfg),
        "--cores",
        "2",
    ]
    env = dict(os.environ, PYTHONPATH=str(REPO))
    # Ctrl-C as in a terminal: a shell that starts the tests in the background leaves
    # SIGINT ignored, the child would inherit that, and Snakemake would never see the signal
    proc = subprocess.Popen(
        cmd,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
        env=env,
        start_new_session=True,
        preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL),
    )
    deadline = time.monotonic() + timeout
    try:
        while time.monotonic() < deadline:
            started, finished = fit_jobs(out)
            if finished and started - finished:
                running = started - finished
                os.killpg(proc.pid, sig)
                break
            assert proc.poll() is None, "the run ended before it could be interrupted"
            time.sleep(0.05)
        else:
            pytest.fail("no fit job was seen running")
        proc.wait(timeout=120)  # after SIGINT, Snakemake stops its jobs and exits
    finally:
        try:
            os.killpg(proc.pid, signal.SIGKILL)
        except ProcessLookupError:
            pass
        proc.wait()
    return running


def same_as_uninterrupted(base: Path, work: Path) -> None:
    out = work / "results" / RUN
    for name in ("fits", "rates", "model_support", "rate_summary", "averaged_rates"):
        a = (base / "results" / RUN / "tables" / f"{name}.tsv").read_bytes()
        b = (out / "tables" / f"{name}.tsv").read_bytes()
        assert a == b, f"{name}.tsv differs from the uninterrupted run"
    # every result, figures and methods text included, equals the uninterrupted run's
    check = mkforest("verify", out, "--against", base / "results" / RUN / "manifest.json")
    assert check.returncode == 0, check.stdout
    assert mkforest("verify", out).returncode == 0


@pytest.mark.slow
def test_interrupted_run_resumes_with_the_same_command(tmp_path_factory, tmp_path):
    base, _ = finished_run(tmp_path_factory)  # the uninterrupted run
    work = tmp_path / "work"
    cfg = prepare_workdir(work, base_config())
    assert stop_during_fitting(work, cfg, signal.SIGINT)
    assert not (work / "results" / RUN / "tables" / "fits.tsv").exists()
    resumed = run_snakemake(work, cfg, "--profile", str(LAPTOP))
    assert resumed.returncode == 0, resumed.stderr[-4000:]
    same_as_uninterrupted(base, work)


@pytest.mark.slow
def test_killed_run_resumes_to_the_tables_of_an_uninterrupted_run(tmp_path_factory, tmp_path):
    base, _ = finished_run(tmp_path_factory)  # the uninterrupted run
    work = tmp_path / "work"
    cfg = prepare_workdir(work, base_config())
    interrupted = stop_during_fitting(work, cfg, signal.SIGKILL)
    assert interrupted, "the kill found no fit job running"
    out = work / "results" / RUN
    assert not (out / "tables" / "fits.tsv").exists()
    # whatever the kill interrupted, every fit table under its final name is whole
    for table in (out / "fits").rglob("*.tsv"):
        assert len(table.read_text().splitlines()) >= 1 + 5, table  # header + 5 trees

    locked = run_snakemake(work, cfg, "--profile", str(LAPTOP))
    assert locked.returncode != 0 and "--unlock" in locked.stderr
    unlocked = run_snakemake(work, cfg, "--unlock")
    assert unlocked.returncode == 0, unlocked.stderr[-2000:]
    resumed = run_snakemake(work, cfg, "--profile", str(LAPTOP))
    assert resumed.returncode == 0, resumed.stderr[-4000:]
    same_as_uninterrupted(base, work)
