# Entry points for a fresh machine (Python 3.10+ with venv):
#   make demo   set up .venv, generate the demo data, run the workflow, build the HTML report
#   make test   set up .venv and run the test suite
#   make lint   ruff, snakefmt and snakemake --lint (CI runs it)
#   make docs   build the manual (docs/) into site/, strictly (CI runs it)
#   make init TREES=my_trees.nex TRAITS=my_traits.csv   write my_config.yaml for your own data
#   make run CONFIG=my_config.yaml   run the workflow on your own config (make init writes one);
#               PROFILE=slurm for a cluster, ARGS="..." for more snakemake options
VENV ?= .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.mkforest-installed

.PHONY: demo init run test test-slow test-cluster setup bench clean-demo lint docs

setup: $(STAMP)

$(STAMP): pyproject.toml
	python3 -m venv $(VENV)
	$(BIN)/pip install --quiet --upgrade pip
	$(BIN)/pip install --quiet -e '.[test,cluster,lint,docs]'
	$(BIN)/python -m mkforest.engine.warm
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/snakemake --profile profiles/laptop
	$(BIN)/snakemake --profile profiles/laptop --report results/demo/report.html
	@echo "Demo finished: results/demo/ (tables/, plots/, methods.md, report.html)"

# make init TREES=my_trees.nex TRAITS=my_traits.csv [ARGS="--taxon-column species --output other.yaml"]
init: $(STAMP)
	@test -n "$(TREES)" -a -n "$(TRAITS)" || { echo "usage: make init TREES=my_trees.nex TRAITS=my_traits.csv [ARGS=\"--output my_config.yaml\"]"; exit 2; }
	$(BIN)/mkforest init --trees "$(TREES)" --traits "$(TRAITS)" $(ARGS)

# make run CONFIG=my_config.yaml [PROFILE=slurm] [ARGS="--report report.html"]
PROFILE ?= laptop
run: $(STAMP)
	@test -n "$(CONFIG)" || { echo "usage: make run CONFIG=my_config.yaml (write one with: make init TREES=FILE TRAITS=FILE)"; exit 2; }
	$(BIN)/snakemake --profile profiles/$(PROFILE) --configfile $(CONFIG) $(ARGS)

test: $(STAMP)
	$(BIN)/pytest -q

# ruff (Python lint and format), snakefmt (rule files), snakemake --lint (the workflow)
lint: $(STAMP)
	$(BIN)/ruff check .
	$(BIN)/ruff format --check .
	$(BIN)/snakefmt --check Snakefile workflow/rules/
	$(BIN)/snakemake --lint -n --quiet

# the manual: docs/ -> site/; a broken link or a page missing from mkdocs.yml's nav fails
docs: $(STAMP)
	$(BIN)/mkdocs build --strict

test-slow: $(STAMP)
	$(BIN)/pytest -q -m slow

test-cluster: $(STAMP)
	$(BIN)/pytest -q -m slurm

bench: $(STAMP)
	$(BIN)/python benchmarks/bench_likelihood.py

clean-demo:
	rm -rf results/demo demo/data
