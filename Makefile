# Two commands do all the set-up on a fresh clone that has python3 and make:
#   make demo   writes the invented demo study and audits it
#   make test   runs the whole test suite
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP_RUN := $(VENV)/.installed-run
STAMP_TEST := $(VENV)/.installed-test

.PHONY: demo test bench clean

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip

# The grouping's compiled merge loop (13-28 s measured here) and the cut-off check's compiled
# search are compiled once into numba's cache here, so that an audit of a large panel only loads them.
WARM_UP := $(BIN)/python -c "from calibrate.panel.compiled_merges import warm_up; warm_up()"
WARM_UP += && $(BIN)/python -c "from calibrate.lens.compiled_search import warm_up; warm_up()"

$(STAMP_RUN): pyproject.toml | $(BIN)/python
	$(BIN)/python -m pip install --quiet -e .
	$(WARM_UP)
	touch $@

$(STAMP_TEST): pyproject.toml | $(BIN)/python
	$(BIN)/python -m pip install --quiet -e '.[test]'
	$(WARM_UP)
	touch $(STAMP_RUN) $@

demo_data/study.toml: | $(STAMP_RUN)
	$(BIN)/calibrate demo --out demo_data

demo: $(STAMP_RUN) demo_data/study.toml
	$(BIN)/calibrate audit demo_data/study.toml --out reports/demo --overwrite
	@echo "Outputs are in reports/demo/ (results.json, tables/, audit.xlsx, reports)."

test: $(STAMP_TEST)
	$(BIN)/python -m pytest -n 2

bench: $(STAMP_TEST)
	for f in benchmarks/bench_*.py; do $(BIN)/python $$f || exit 1; done

clean:
	rm -rf $(VENV) reports build *.egg-info
