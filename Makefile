# The two commands of the README: `make demo` and `make test`. Both create .venv when missing.
PYTHON ?= python3
VENV   := .venv
PY     := $(VENV)/bin/python
STAMP_RUN  := $(VENV)/.installed-run
STAMP_TEST := $(VENV)/.installed-test

.PHONY: demo test lab bench clean

$(PY):
	$(PYTHON) -m venv $(VENV)
	$(PY) -m pip install -q --upgrade pip

$(STAMP_RUN): pyproject.toml | $(PY)
	$(PY) -m pip install -q -e .
	touch $@

$(STAMP_TEST): pyproject.toml | $(PY)
	$(PY) -m pip install -q -e ".[test]"
	touch $(STAMP_RUN) $@

demo: $(STAMP_RUN)
	$(VENV)/bin/debrief demo

test: $(STAMP_TEST)
	$(PY) -m pytest

lab: $(STAMP_TEST)
	$(VENV)/bin/jupyter lab $(if $(filter 0,$(shell id -u)),--allow-root) templates/explore.ipynb

bench: $(STAMP_TEST)
	$(PY) benchmarks/run_all.py

clean:
	rm -rf $(VENV) debrief-demo build *.egg-info
