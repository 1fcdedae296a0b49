# flexure: the two set-up commands of the README are `make demo` and `make test`.
# Both install the system packages they need first (scripts/install-system-deps.sh).

CARGO ?= cargo
export OPENBLAS_NUM_THREADS = 1

.PHONY: deps build demo demo-data test lint bench segy-fixtures

deps:
	bash scripts/install-system-deps.sh

build: deps
	$(CARGO) build --release -p flexure-cli

## Run the main jobs on the shipped demo data; results in demo_output/.
demo: build
	./target/release/flexure demo --out demo_output

## Regenerate demo_horizons/ from its analytic definition (deterministic).
demo-data: build
	./target/release/flexure demo-data --out demo_horizons

lint: deps
	$(CARGO) fmt --all -- --check
	$(CARGO) clippy --workspace --all-targets -- -D warnings

## The whole test suite: formatting, lints, unit and integration tests, benches compile.
test: lint
	bash scripts/install-system-deps.sh --test
	$(CARGO) test --workspace
	$(CARGO) bench --workspace --no-run

## Criterion benchmarks (not part of the tests): throughput, and flexure side by side with the
## numpy/scipy peer on a 2048 x 2048 grid; then peak memory and file sizes up to 8192 x 8192.
bench:
	bash scripts/install-system-deps.sh --bench
	$(CARGO) bench -p flexure-engine --bench throughput --bench side_by_side
	$(CARGO) build --release -p flexure-cli
	bash scripts/bench/memory.sh

## Regenerate the SEG-Y fixtures and segyio's readings of them (engine/tests/data/segy/): flexure
## writes its own files, then scripts/fixtures/segy_fixtures.py writes segyio's and reads all.
SEGY_VENV = target/segy-venv
segy-fixtures:
	python3 -m venv $(SEGY_VENV)
	$(SEGY_VENV)/bin/pip install --quiet segyio==1.9.14 numpy
	$(CARGO) test -p flexure-engine --test segy_reference -- --ignored --exact write_writer_fixtures
	$(SEGY_VENV)/bin/python scripts/fixtures/segy_fixtures.py engine/tests/data/segy
