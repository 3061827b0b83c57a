# qcpipe: the two quick-start targets and a few helpers.
PYTHON ?= python3
VENV   := .venv
PY     := $(VENV)/bin/python
STAMP  := $(VENV)/.installed
TESTSTAMP := $(VENV)/.installed-test

.PHONY: demo test check-config clean-demo demo-data bench digest

$(PY):
	$(PYTHON) -m venv $(VENV)
	@$(PY) -m pip install --quiet --upgrade pip > /dev/null 2>&1 || true

# pip's own chatter goes to a log; it is shown only when the install fails
$(STAMP): pyproject.toml | $(PY)
	@echo "installing qcpipe into $(VENV) (log: $(VENV)/install.log)"
	@$(PY) -m pip install -e . > $(VENV)/install.log 2>&1 || (cat $(VENV)/install.log; exit 1)
	@touch $@

$(TESTSTAMP): pyproject.toml | $(PY)
	@echo "installing qcpipe with its test extras into $(VENV) (log: $(VENV)/install.log)"
	@$(PY) -m pip install -e '.[test]' > $(VENV)/install.log 2>&1 || (cat $(VENV)/install.log; exit 1)
	@touch $@ $(STAMP)

## make demo: run the nightly flow once over the demo inbox (sample_raw/inbox)
demo: $(STAMP)
	$(VENV)/bin/qcpipe process --workspace sample_raw/workspace.toml

## make test: Debian packages the tests need (libudunits2-0, chromium), test extras, whole suite
## on two worker processes (pytest-xdist; a file's tests stay on one worker, so its fixtures are built once)
test: $(TESTSTAMP)
	@bash tools/ensure-system-libs.sh
	$(PY) -m pytest -q -n 2 --dist loadfile --durations=15

check-config: $(STAMP)
	$(VENV)/bin/qcpipe check --workspace sample_raw/workspace.toml

## regenerate the invented demo downloads (seeded; deterministic)
demo-data: $(STAMP)
	$(PY) tools/make_demo_data.py

clean-demo:
	rm -rf demo_archive

## make bench: speed ratios against their targets (benchmarks/README.md); writes benchmarks/last-run.json,
## then the speed-up of 2 Dask workers over 1 on a multi-station nightly run, then the orchestrator's
## share of a demo run and the wall time of a run with nothing to do. BENCH_ARGS=--skip-big leaves out the 1 GB
## big-file case (several minutes)
bench: $(STAMP)
	$(PY) benchmarks/run.py $(BENCH_ARGS)
	$(PY) benchmarks/dask_speedup.py
	$(PY) benchmarks/orchestrator_share.py

## make digest: record the demo's output digest (tests/reference/demo_outputs_digest.json) after a change
## that is meant to alter outputs; say so in the commit message
digest: $(STAMP)
	rm -rf demo_archive
	$(VENV)/bin/qcpipe process --workspace sample_raw/workspace.toml --quiet
	$(PY) tools/output_digest.py demo_archive > tests/reference/demo_outputs_digest.json
