"""Write methods.md from the run's settings and tables."""

import sys
from pathlib import Path

sys.path.insert(0, str(Path(snakemake.scriptdir).parent))  # noqa: F821

import json

from mkforest.data.traits import traits_from_json, written_names, written_text
from mkforest.jobs.analyses import analysis_setup
from mkforest.jobs.scripting import run_job
from mkforest.report.methods import methods_text, read_tables, table_name
from mkforest.report.provenance import software_versions


def main(smk):
    config = smk.params.config
    traits = traits_from_json(json.loads(Path(smk.input.traits).read_text()))
    models = {a: analysis_setup(config, a, traits)[1] for a in smk.params.analyses}
    paths = {table_name(p): p for p in smk.input.tables}
    paths.update(
        {
            table_name(p): p
            for p in (smk.input.support, smk.input.used, smk.input.check, smk.input.rates)
        }
    )
    text = methods_text(config, read_tables(paths), models, software_versions())
    Path(smk.output[0]).write_text(written_text(text, written_names(smk.input.traits)))


run_job(snakemake, main)  # noqa: F821
