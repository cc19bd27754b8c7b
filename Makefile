# The documented way in: `make demo`, `make test`, `make lint`, `make bench`.
VENV    := .venv
PY      := $(VENV)/bin/python
STAMP   := $(VENV)/.deps-installed
export CARGO_TERM_COLOR := never

.PHONY: help build-dev build-release demo test test-rust test-python lint format bench bench-rust fuzz clean

help:
	@echo "make demo         build the release extension and run the demo"
	@echo "make test         build, then cargo test and pytest"
	@echo "make lint         cargo fmt --check, cargo clippy -D warnings, ruff"
	@echo "make bench        the Python benchmark table (benches/RESULTS.md)"
	@echo "make bench-rust   criterion benchmarks of the engine kernels"
	@echo "make fuzz         fuzz the index loader, FUZZ_RUNS (1000000) runs a target"

$(STAMP): pyproject.toml
	python3 -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip
	$(PY) -m pip install --quiet "maturin>=1.7,<2"
	touch $(STAMP)

# The extension is always built optimised: the property tests run millions of queries.
# PIP_QUIET: maturin's pip run would list every extra as "Requirement already satisfied".
build-dev: $(STAMP)
	PIP_QUIET=1 $(VENV)/bin/maturin develop --release --quiet --extras test,bench,dev,parquet,plot

# Only what the demo needs (numpy, matplotlib for its heatmap): no test, bench or dev extras.
build-release: $(STAMP)
	PIP_QUIET=1 $(VENV)/bin/maturin develop --release --quiet --extras plot

demo: build-release
	$(PY) -m boxwood.demo

test-rust:
	cargo test -p boxwood-core --release

test-python: build-dev
	$(PY) -m pytest -q

test: test-rust test-python

lint: build-dev
	cargo fmt --all -- --check
	cargo clippy --all-targets -p boxwood-core -- -D warnings
	cargo clippy -p boxwood-python -- -D warnings
	$(VENV)/bin/ruff check python tests benches
	$(VENV)/bin/ruff format --check python tests benches
	$(VENV)/bin/mypy python/boxwood

format: $(STAMP)
	cargo fmt --all
	$(VENV)/bin/ruff format python tests benches
	$(VENV)/bin/ruff check --fix python tests benches

bench: build-dev
	$(PY) benches/bench_core.py

bench-rust:
	cargo bench -p boxwood-core

# Coverage-guided fuzzing of the index loader (rust_core/fuzz): minutes, so not part of
# `make test`. Seeds are generated, never committed; RESULTS.md records the last run.
FUZZ_RUNS  ?= 1000000
CARGO_FUZZ := .tools/bin/cargo-fuzz

$(CARGO_FUZZ):
	cargo install --locked cargo-fuzz --version 0.13.2 --root .tools

fuzz: $(CARGO_FUZZ)
	cargo run --release -q -p boxwood-core --example fuzz_seeds -- rust_core/fuzz/corpus/seeds
	CARGO_FUZZ=$(CARGO_FUZZ) bash rust_core/fuzz/run.sh $(FUZZ_RUNS)

clean:
	rm -rf $(VENV) target
