"""Glue shared by the workflow's scripts (the engine never imports Snakemake;
this module only receives the ``snakemake`` object a script is given)."""

from __future__ import annotations

import logging
import sys
import time
from pathlib import Path

from .errors import InputError


def run_job(snakemake, main) -> None:
    """Run ``main(snakemake)`` with logging to the job's log file.

    A user mistake (InputError) is written to the log and to stderr as one plain
    sentence and the job exits with status 2; Snakemake then removes this job's
    incomplete outputs and keeps everything already finished.
    """
    log_path = snakemake.log[0] if len(snakemake.log) else None
    handlers = [logging.StreamHandler(sys.stderr)]
    if log_path:
        Path(log_path).parent.mkdir(parents=True, exist_ok=True)
        handlers.append(logging.FileHandler(log_path, mode="w"))
    logging.basicConfig(level=logging.INFO, format="%(asctime)s %(message)s", handlers=handlers,
                        force=True)
    log = logging.getLogger("mkforest")
    start = time.perf_counter()
    try:
        main(snakemake)
    except InputError as exc:
        log.error("mkforest: error: %s", exc)
        sys.exit(2)
    log.info("done in %.2f s", time.perf_counter() - start)
