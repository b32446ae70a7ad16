# The single entry point. The targets share one virtual environment (.venv), created on
# first use, so nothing needs to be installed by hand beyond Python 3.10+ and Rust. Installs
# are quiet: their output goes to .venv/install.log and is shown only when they fail.
#   make demo    install (release build) and run the demo on the bundled data
#   make test    install test dependencies, run every Rust and Python test
#   make lint    cargo fmt --check, clippy -D warnings, ruff
#   make bench   release build, then the benchmarks under tests/bench/
#   make properties  the property tests under the soak profile, with their case counts
#   make dev     fast incremental rebuild for the edit loop

PYTHON ?= python3
VENV   ?= .venv
PY     := $(VENV)/bin/python
export VIRTUAL_ENV := $(abspath $(VENV))

.PHONY: demo test lint bench dev install install-test clean properties

$(VENV)/created:
	@echo "creating $(VENV)"
	@$(PYTHON) -m venv $(VENV)
	@$(PY) -m pip install --quiet --upgrade pip > /dev/null
	@$(PY) -m pip install --quiet "maturin>=1.16,<2" > /dev/null
	@touch $@

install: $(VENV)/created
	@echo "building bagwise (release) into $(VENV); log in $(VENV)/install.log"
	@$(VENV)/bin/maturin develop --release --quiet > $(VENV)/install.log 2>&1 \
		|| (cat $(VENV)/install.log; exit 1)

install-test: $(VENV)/created
	@echo "building bagwise (fastdev) with the test extras into $(VENV); log in $(VENV)/install.log"
	@$(VENV)/bin/maturin develop --profile fastdev --extras test --quiet > $(VENV)/install.log 2>&1 \
		|| (cat $(VENV)/install.log; exit 1)

dev: install-test

demo: install
	$(PY) -m bagwise demo

test: install-test
	cargo test --quiet
	$(PY) -m mypy.stubtest bagwise._core
	$(PY) -m pytest

lint: install-test
	cargo fmt --check
	cargo clippy --quiet --all-targets -- -D warnings
	cargo clippy --quiet --all-targets --features python -- -D warnings
	$(VENV)/bin/ruff check python tests demo-data notebooks/build.py

# The soak of the property tests: >= 20,000 generated cases over every public call; prints
# the cases tried / accepted / refused / crashed per call and in total (also in
# .venv/properties-summary.json).
properties: install-test
	BAGWISE_HYPOTHESIS_PROFILE=soak BAGWISE_PROPERTIES_SUMMARY=$(VENV)/properties-summary.json \
		$(PY) -m pytest tests/test_properties.py -q -p no:cacheprovider

bench: install
	@set -e; for script in tests/bench/bench_*.py; do \
		echo "== $$script"; $(PY) $$script; \
	done

clean:
	rm -rf $(VENV) target
