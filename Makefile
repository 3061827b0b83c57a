# qcpipe: the two quick-start targets and a few helpers.
PYTHON ?= python3
VENV   := .venv
PY     := $(VENV)/bin/python
STAMP  := $(VENV)/.installed
TESTSTAMP := $(VENV)/.installed-test

.PHONY: demo test check-config clean-demo demo-data

$(PY):
	$(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip

$(STAMP): pyproject.toml | $(PY)
	$(PY) -m pip install --quiet -e .
	touch $@

$(TESTSTAMP): pyproject.toml | $(PY)
	$(PY) -m pip install --quiet -e '.[test]'
	touch $@ $(STAMP)

## make demo: run the nightly flow once over the demo inbox (sample_raw/inbox)
demo: $(STAMP)
	$(VENV)/bin/qcpipe process --workspace sample_raw/workspace.toml

## make test: system library for the CF checker, test extras, whole suite
test: $(TESTSTAMP)
	@bash tools/ensure-system-libs.sh
	$(PY) -m pytest -q

check-config: $(STAMP)
	$(VENV)/bin/qcpipe check --workspace sample_raw/workspace.toml

## regenerate the invented demo downloads (seeded; deterministic)
demo-data: $(STAMP)
	$(PY) tools/make_demo_data.py

clean-demo:
	rm -rf demo_archive
