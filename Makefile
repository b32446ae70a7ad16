# The single entry point. The targets share one virtual environment (.venv), created on
# first use, so nothing needs to be installed by hand beyond Python 3.10+ and Rust. Installs
# are quiet: their output goes to .venv/install.log and is shown only when they fail.
#   make demo    install (release build) and run the demo on the bundled data
#   make test    install test dependencies, run every Rust and Python test
#   make lint    cargo fmt --check, clippy -D warnings, ruff
#   make bench   release build, then the benchmarks under tests/bench/
#   make properties  the property tests under the soak profile, with their case counts
#   make dev     fast incremental rebuild for the edit loop
#   make soak    release build, then 1,000 calls of every main entry point (RSS, threads, files)
#   make fuzz    the loader fuzz targets (cargo-fuzz, nightly) for FUZZ_SECONDS in all

PYTHON ?= python3
VENV   ?= .venv
PY     := $(VENV)/bin/python
export VIRTUAL_ENV := $(abspath $(VENV))

.PHONY: demo test lint bench dev install install-test clean soak fuzz properties

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

# Every script runs; one whose targets are missed is named at the end (and fails the target).
bench: install
	@missed=""; for script in tests/bench/bench_*.py; do \
		echo "== $$script"; $(PY) $$script || missed="$$missed $$script"; \
	done; \
	if [ -n "$$missed" ]; then echo "targets missed in:$$missed"; exit 1; fi

soak: install
	$(PY) tests/bench/soak.py
# Loader fuzzing: seeds the corpora with valid files (examples/fuzz_seeds.rs), then runs
# each target for its share of FUZZ_SECONDS. Needs `rustup toolchain install nightly` and
# `cargo install cargo-fuzz`. A crash lands in fuzz/artifacts/<target>/.
FUZZ_SECONDS ?= 600
FUZZ_TARGETS ?= model_payload model_file_fixed_crc model_file
FUZZ_RSS_MB  ?= 1024
fuzz:
	cargo run --quiet --example fuzz_seeds
	@set -e; targets="$(FUZZ_TARGETS)"; share=$$(( $(FUZZ_SECONDS) / $$(echo $$targets | wc -w) )); \
	for target in $$targets; do \
		echo "== $$target for $$share s"; \
		cargo +nightly fuzz run $$target -- -max_total_time=$$share \
			-rss_limit_mb=$(FUZZ_RSS_MB) -malloc_limit_mb=$(FUZZ_RSS_MB) -print_final_stats=1; \
	done

clean:
	rm -rf $(VENV) target
