# Favour: set-up, tests, demo, package and benchmarks. Every target that needs
# Python first runs scripts/setup.sh (via the stamp file), which installs what
# is missing on a fresh Debian 12 or 13 machine.

VENV   ?= .venv
PY     := $(VENV)/bin/python
STAMP  := $(VENV)/.installed
export QT_QPA_PLATFORM ?= offscreen

.PHONY: setup test lint demo demo-data package bench clean help screenshot

help:
	@echo "make test     ruff + the whole test suite, headless"
	@echo "make demo     evaluate the demo district; outputs in build/demo/"
	@echo "make package  build favour_plugin.zip for QGIS 'Install from ZIP'"
	@echo "make bench    benchmark scripts (print ratios, not timed tests)"

$(STAMP): scripts/setup.sh requirements-dev.txt
	scripts/setup.sh

setup: $(STAMP)

lint: $(STAMP)
	$(PY) -m ruff check favour_plugin tests scripts resources bench

test: lint
	$(PY) -m pytest

demo-data: $(STAMP)
	$(PY) resources/demo/generate.py

demo: demo-data
	$(PY) resources/demo/run_demo.py

package: $(STAMP)
	$(PY) scripts/package.py

bench: $(STAMP)
	$(PY) bench/bench_evaluate.py
	$(PY) bench/bench_evidence.py
	$(PY) bench/bench_montecarlo.py
	$(PY) bench/bench_validation.py

screenshot: $(STAMP)
	$(PY) scripts/screenshot_dock.py

clean:
	rm -rf build favour_plugin.zip .pytest_cache .ruff_cache
