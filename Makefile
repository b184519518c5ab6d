# fockmill developer verbs. `make demo` and `make test` work on a fresh machine with
# Python 3.11+ and a Rust toolchain: they create .venv and build the extension.
PYTHON ?= python3
VENV ?= .venv
PY := $(VENV)/bin/python
EXTRAS := test,fast,plot,progress,cluster

.PHONY: venv dev demo test test-rs test-py lint format bench clean

venv: $(VENV)/.ready

$(VENV)/.ready: pyproject.toml
	$(PYTHON) -c 'import sys; assert sys.version_info >= (3, 11), "Python 3.11+ is required"'
	$(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip "maturin>=1.7,<2"
	touch $@

dev: venv
	VIRTUAL_ENV=$(abspath $(VENV)) $(VENV)/bin/maturin develop --release --quiet --extras $(EXTRAS)

demo: dev
	$(PY) examples/demo.py
	$(VENV)/bin/fockmill demo --out-dir out/demo

test-rs:
	cargo test -p fockmill-core --release

test-py: dev
	$(PY) -m pytest -q

lint: dev
	cargo fmt --all -- --check
	cargo clippy --workspace --all-targets -- -D warnings
	$(VENV)/bin/ruff check python tests benchmarks examples
	$(VENV)/bin/ruff format --check python tests benchmarks examples
	$(PY) -m mypy.stubtest fockmill._native

test: test-rs lint test-py

format: venv
	cargo fmt --all
	$(VENV)/bin/ruff format python tests benchmarks examples
	$(VENV)/bin/ruff check --fix python tests benchmarks examples

bench: dev
	$(PY) benchmarks/bench_build.py
	$(PY) benchmarks/bench_matvec.py
	$(PY) benchmarks/bench_ground.py
	$(PY) benchmarks/bench_levels.py
	$(PY) benchmarks/bench_sweep.py

clean:
	rm -rf target $(VENV) .pytest_cache .ruff_cache .hypothesis
