# The documented way in: `make demo`, `make test`, `make lint`, `make bench`.
VENV    := .venv
PY      := $(VENV)/bin/python
STAMP   := $(VENV)/.deps-installed
export CARGO_TERM_COLOR := never

.PHONY: help build-dev build-release demo test test-rust test-python lint format bench bench-large bench-compare bench-rust fuzz clean

help:
	@echo "make demo         build the release extension and run the demo"
	@echo "make test         build, then cargo test and pytest"
	@echo "make lint         cargo fmt --check, cargo clippy -D warnings, ruff"
	@echo "make bench        every Python benchmark writes its section of benches/RESULTS.md"
	@echo "make bench-large  n = 10^8 (about 10 GB); also run by make bench with BENCH_LARGE=1"
	@echo "make bench-compare  benchmarks at small n under pytest, compared with the last saved run"
	@echo "make bench-rust   criterion benchmarks of the engine kernels, into benches/RESULTS.md"
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

# Each script writes its own stamped section of benches/RESULTS.md (and its README block);
# sizes are overridable, e.g. `make bench BENCH_CORE_SIZES=1e6 BENCH_SUMS_ROWS=1e6`.
BENCH_SCRIPTS := bench_memory bench_core bench_sums bench_scalar bench_files bench_layout bench_groups
BENCH_LARGE   ?=
bench: build-dev
	@for b in $(BENCH_SCRIPTS); do echo "== benches/$$b.py"; $(PY) benches/$$b.py || exit 1; done
	@if [ -n "$(BENCH_LARGE)" ] && [ "$(BENCH_LARGE)" != 0 ]; then $(MAKE) --no-print-directory bench-large; fi

bench-large: build-dev
	$(PY) benches/bench_large.py

# pytest-benchmark at small n: each run is saved in .benchmarks/ (ignored by git) and compared
# with the last saved one; a median slower by more than BENCH_COMPARE_FAIL fails.
BENCH_COMPARE_FAIL ?= median:25%
BENCH_PYTEST := $(PY) -m pytest benches -q --benchmark-autosave --benchmark-group-by=name \
	--benchmark-columns=min,median,iqr,rounds
bench-compare: build-dev
	@if ls .benchmarks/*/*.json >/dev/null 2>&1; then \
		$(BENCH_PYTEST) --benchmark-compare --benchmark-compare-fail=$(BENCH_COMPARE_FAIL); \
	else \
		echo "no saved run in .benchmarks/ yet: this run becomes the one to compare against"; \
		$(BENCH_PYTEST); \
	fi

# cargo bench of the kernels, then criterion's estimates as a section of benches/RESULTS.md.
bench-rust: $(STAMP)
	$(PY) benches/bench_kernels.py

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
