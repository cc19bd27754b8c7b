# The documented way in: `make demo`, `make test`, `make lint`, `make bench`, `make wheel`.
VENV    := .venv
PY      := $(VENV)/bin/python
STAMP   := $(VENV)/.deps-installed
export CARGO_TERM_COLOR := never

# Wheels: abi3 (one wheel for every CPython >= 3.9), linked by zig against glibc 2.17
# (manylinux2014), so one x86-64 Linux wheel installs on any distribution of the last decade.
DIST         := dist
WHEEL_TARGET ?= x86_64-unknown-linux-gnu
WHEEL_COMPAT ?= manylinux2014
# The fresh venv the installed wheel is tested in (make test).
WHEEL_VENV   := .venv-wheel

.PHONY: help build-dev build-release demo test test-rust test-python test-installed wheel sdist check-sdist lint format bench bench-large bench-compare bench-rust fuzz clean

help:
	@echo "make demo         build the release extension and run the demo"
	@echo "make test         cargo test, then pytest against the wheel installed in a fresh venv"
	@echo "make test-python  pytest against the in-tree build (make build-dev): quick, for iterating"
	@echo "make wheel        the portable abi3 manylinux2014 wheel, into dist/"
	@echo "make sdist        the source distribution, into dist/"
	@echo "make check-sdist  pip install the sdist into a fresh venv in a temporary folder and use it"
	@echo "make lint         cargo fmt --check, cargo clippy -D warnings, ruff"
	@echo "make bench        every Python benchmark writes its section of benches/RESULTS.md"
	@echo "make bench-large  n = 10^8 (about 10 GB); also run by make bench with BENCH_LARGE=1"
	@echo "make bench-compare  benchmarks at small n under pytest, compared with the last saved run"
	@echo "make bench-rust   criterion benchmarks of the engine kernels, into benches/RESULTS.md"
	@echo "make fuzz         fuzz the index loader, FUZZ_RUNS (1000000) runs a target"

$(STAMP): pyproject.toml
	python3 -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip
	$(PY) -m pip install --quiet "maturin>=1.16,<2" "ziglang>=0.17,<0.18"
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

# The Python tests against the installed wheel, as a user gets it: a fresh venv, no Rust
# toolchain on PATH (every directory holding cargo or rustc is dropped), the pytest script of
# the venv (so neither the working directory nor python/ is on sys.path); tests/test_wheel.py
# checks all three and the wheel itself (BOXWOOD_WHEEL).
NO_RUST_PATH = $$(printf '%s\n' "$$PATH" | tr ':' '\n' | while read -r d; do \
	[ -n "$$d" ] && [ ! -e "$$d/cargo" ] && [ ! -e "$$d/rustc" ] && printf '%s\n' "$$d"; \
	done | paste -sd: -)
test-installed: wheel
	rm -rf $(WHEEL_VENV)
	python3 -m venv $(WHEEL_VENV)
	wheel=$$(ls $(DIST)/boxwood-*.whl) && \
	$(WHEEL_VENV)/bin/python -m pip install --quiet "$$wheel[test]" && \
	env PATH="$(abspath $(WHEEL_VENV))/bin:$(NO_RUST_PATH)" BOXWOOD_WHEEL="$(abspath .)/$$wheel" \
		$(WHEEL_VENV)/bin/pytest -q

test: test-rust test-installed

# zig (the ziglang package in .venv) links against its glibc 2.17 stubs, whatever this
# machine's glibc; maturin then audits the symbol versions against the tag. Cargo's `dist`
# profile is release without debug info (Cargo.toml).
wheel: $(STAMP)
	rm -f $(DIST)/boxwood-*.whl
	PATH="$(abspath $(VENV))/bin:$$PATH" $(VENV)/bin/maturin build --profile dist --zig \
		--compatibility $(WHEEL_COMPAT) --target $(WHEEL_TARGET) --out $(DIST)

sdist: $(STAMP)
	rm -f $(DIST)/boxwood-*.tar.gz
	$(VENV)/bin/maturin sdist --out $(DIST)

# What a user without the repository does: plain `pip install boxwood-X.tar.gz` (the build
# backend and the toolchain are the only things needed), then a count checked against numpy.
check-sdist: sdist
	tmp=$$(mktemp -d) && trap 'rm -rf "$$tmp"' EXIT && \
	python3 -m venv "$$tmp/venv" && \
	"$$tmp/venv/bin/python" -m pip install --quiet $(abspath $(DIST))/boxwood-*.tar.gz && \
	cp tests/check_install.py tests/_elf.py "$$tmp/" && cd "$$tmp" && venv/bin/python check_install.py

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
BENCH_SCRIPTS := bench_memory bench_core bench_sums bench_scalar bench_files bench_layout bench_groups bench_growing bench_stats bench_dask_join
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
	rm -rf $(VENV) $(WHEEL_VENV) $(DIST) target
