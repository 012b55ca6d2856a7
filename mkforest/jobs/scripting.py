"""Glue shared by the workflow's scripts (the engine never imports Snakemake;
this module only receives the ``snakemake`` object a script is given)."""

from __future__ import annotations

import logging
import os
import resource
import shutil
import sys
import threading
import time
from pathlib import Path

from ..errors import InputError


def run_job(snakemake, main) -> None:
    """Run ``main(snakemake)`` with logging to the job's log file.

    A user mistake (InputError) is written to the log and to stderr as one plain
    sentence and the job exits with status 2; Snakemake then removes this job's
    incomplete outputs and keeps everything already finished. Outputs take their
    final names only once ``main`` has returned (see ``staged_outputs``).
    """
    log_path = snakemake.log[0] if len(snakemake.log) else None
    handlers = [logging.StreamHandler(sys.stderr)]
    if log_path:
        Path(log_path).parent.mkdir(parents=True, exist_ok=True)
        handlers.append(logging.FileHandler(log_path, mode="w"))
    logging.basicConfig(
        level=logging.INFO, format="%(asctime)s %(message)s", handlers=handlers, force=True
    )
    log = logging.getLogger("mkforest")
    start = time.perf_counter()
    final = snakemake.output
    snakemake.output = staged_outputs(final)
    try:
        main(snakemake)
    except InputError as exc:
        log.error("mkforest: error: %s", exc)
        discard_staged(snakemake.output)
        sys.exit(2)
    except BaseException:
        discard_staged(snakemake.output)
        raise
    publish_outputs(snakemake.output, final)
    # process CPU time counts from the interpreter's start: imports included
    log.info(
        "done in %.2f s (CPU %.2f s since the process started, peak memory %.0f MB)",
        time.perf_counter() - start,
        time.process_time(),
        peak_memory_mb(),
    )


def peak_memory_mb() -> float:
    """Peak resident memory of this process in MB: VmHWM on Linux (ru_maxrss would
    also count the forking parent: Linux carries it over an exec), else ru_maxrss."""
    try:
        with open("/proc/self/status") as fh:
            for line in fh:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1]) / 1024
    except OSError:
        pass
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


# Outputs are written under a hidden folder beside their final place and moved there
# (an atomic rename on one file system) only when the job has finished. A job killed
# midway (power cut, SIGKILL, scancel) therefore never leaves a half-written file under
# an output's name: Snakemake's own incomplete-file check does not reach the jobs that
# depend on a checkpoint, which in this workflow is nearly every job.


def _staging_dir(path: str) -> Path:
    return Path(path).parent / f".mkforest-writing-{os.getpid()}"


def staged_outputs(outputs):
    """A copy of Snakemake's output list (names kept) pointing into the staging folders."""
    staged = type(outputs)(
        toclone=outputs, custom_map=lambda p: str(_staging_dir(p) / Path(p).name)
    )
    for p in staged:
        Path(p).parent.mkdir(parents=True, exist_ok=True)
    return staged


def publish_outputs(staged, final) -> None:
    """Move every finished output to its final name, then remove the staging folders."""
    for tmp, dest in zip(staged, final):
        tmp, dest = Path(tmp), Path(dest)
        if not tmp.exists():
            continue  # not written: Snakemake reports the missing output
        if dest.is_dir() and not dest.is_symlink():
            shutil.rmtree(dest)
        os.replace(tmp, dest)
    discard_staged(staged)


def discard_staged(staged) -> None:
    for folder in {Path(p).parent for p in staged}:
        shutil.rmtree(folder, ignore_errors=True)


def cancel_scheduler_timers() -> None:
    """Cancel the scheduler's pending re-evaluation timers once the run is over.

    Snakemake's scheduler starts a one-second threading.Timer after every scheduling
    round (its default job rate limit, 100 jobs per second) and does not cancel it;
    the process cannot exit before that thread ends, so every run took up to 1.4 s
    longer than its last job (measured). The timers only wake the scheduler, which
    has stopped by the time onsuccess/onerror run."""
    for thread in threading.enumerate():
        if isinstance(thread, threading.Timer):
            thread.cancel()
