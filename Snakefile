# mkforest: Markov models of categorical trait evolution over a sample of trees.
# The demo: make demo. Your data: make setup, make init TREES=FILE TRAITS=FILE, then
# make run CONFIG=my_config.yaml (all from this folder).
import sys

from snakemake.utils import min_version

min_version("9.0")

sys.path.insert(0, workflow.basedir)


# The demo config is the default; a --configfile on the command line replaces it
# entirely (never merged with it, so no demo model leaks into a user's run).
if not workflow.config_settings.configfiles:

    configfile: "config/config.yaml"


report: "workflow/report/workflow.rst"


include: "workflow/rules/common.smk"
include: "workflow/rules/prepare.smk"
include: "workflow/rules/fit.smk"
include: "workflow/rules/aggregate.smk"
include: "workflow/rules/plots.smk"
include: "workflow/rules/ancestral.smk"
include: "workflow/rules/pairs.smk"
include: "workflow/rules/bayes.smk"
include: "workflow/rules/scan.smk"
include: "workflow/rules/report.smk"


rule all:
    default_target: True
    input:
        all_targets,
