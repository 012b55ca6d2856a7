"""Write manifest.json: checksums of every input and result, settings, software, trees used."""

import sys
from pathlib import Path

sys.path.insert(0, str(Path(snakemake.scriptdir).parent))  # noqa: F821

import logging

from mkforest.jobs.scripting import run_job
from mkforest.report.provenance import build_manifest, now_utc, relative_command, write_json


def main(smk):
    inv = smk.params.invocation
    invocation = {
        "command": relative_command(inv.command, inv.directory),
        "started": inv.started,
        "finished": now_utc(),
    }
    inputs = list(smk.params.inputs) + [("config", p) for p in smk.params.configfiles]
    # paths under the working folder relative to it: no home folder in an archive
    inputs = [(role, relative_command([p], inv.directory)[0]) for role, p in inputs]
    manifest = build_manifest(
        smk.params.config,
        smk.params.run_folder,
        smk.input.outputs,
        inputs,
        smk.input.used,
        invocation,
    )
    write_json(smk.output[0], manifest)
    logging.getLogger("mkforest").info(
        "%d result files and %d inputs recorded", len(manifest["outputs"]), len(manifest["inputs"])
    )


run_job(snakemake, main)  # noqa: F821
