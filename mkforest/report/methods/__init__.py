"""A methods and results text for a manuscript, written from one run's settings and tables.

Every number in the text is read from the run's tables and rounded; every
setting from the resolved config. Published methods are cited in the text and
listed in full at the end (mkforest.report.citations). Stages that did not run (trait
pairs, ancestral states) are mentioned only when their tables are given.

``methods_text(config, tables, models, software)``:
  tables   {name: DataFrame}: model_support, fits, trees_used, data_check and
           rate_summary are needed; pair_summary, ancestral_states, transitions
           and clades are used when present
  models   {analysis: {model name: (RateModel, root)}} as built for the fits
  software {package: version}, from mkforest.report.provenance.software_versions()

The text is written by one module per section: ``data`` (data and trees), ``models``
(models, fitting, comparison), ``pairs``, ``ancestral``, ``brief`` (the one paragraph),
``results`` (per analysis), ``text`` (the whole, its tables, the run's last words);
``numbers`` words numbers and lists for all of them.
"""

from __future__ import annotations

from .brief import BRIEF_HEADING, BRIEF_MAX_WORDS, brief_paragraph, quoted_models, word_count
from .models import CRITERION_NAMES, describe_model, root_words
from .results import analysis_results, rate_words
from .text import methods_text, read_tables, run_warnings, table_name

__all__ = [
    "BRIEF_HEADING",
    "BRIEF_MAX_WORDS",
    "CRITERION_NAMES",
    "analysis_results",
    "brief_paragraph",
    "describe_model",
    "methods_text",
    "quoted_models",
    "rate_words",
    "read_tables",
    "root_words",
    "run_warnings",
    "table_name",
    "word_count",
]
