# fockmill developer verbs. `make demo` and `make test` work on a fresh machine with
# Python 3.11+ and a Rust toolchain: they create .venv and build the extension.
PYTHON ?= python3
VENV ?= .venv
PY := $(VENV)/bin/python
EXTRAS := test,fast,plot,progress,cluster

WHEEL_DIR := target/wheels
WHEEL_VENV := target/wheel-venv
# The wheel test runs with only the system directories on PATH: no cargo, no rustc.
BARE_PATH := /usr/bin:/bin
WHEEL_TESTS := tests/test_space.py tests/test_spectra.py tests/test_statefile.py

.PHONY: venv dev demo test test-rs test-py test-wheel wheel lint format bench clean

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
	$(VENV)/bin/lint-imports

# The abi3 wheel (one file for every CPython >= 3.11 on this platform) in target/wheels.
wheel: venv
	rm -f $(WHEEL_DIR)/fockmill-*.whl
	$(VENV)/bin/maturin build --release --quiet --out $(WHEEL_DIR)

# Install the wheel into a fresh venv that has no Rust toolchain on PATH, then run the
# README example and a few test files against the installed package.
test-wheel: wheel
	rm -rf $(WHEEL_VENV)
	env PATH=$(BARE_PATH) $$($(PY) -c 'import sys; print(sys._base_executable)') -m venv $(WHEEL_VENV)
	env PATH=$(abspath $(WHEEL_VENV))/bin:$(BARE_PATH) sh -c '! command -v cargo && ! command -v rustc'
	env PATH=$(abspath $(WHEEL_VENV))/bin:$(BARE_PATH) $(WHEEL_VENV)/bin/python -m pip install \
		--quiet $(WHEEL_DIR)/fockmill-*.whl "pytest>=8" "hypothesis>=6.100"
	env PATH=$(abspath $(WHEEL_VENV))/bin:$(BARE_PATH) $(WHEEL_VENV)/bin/python .ci/wheel_smoke.py
	env PATH=$(abspath $(WHEEL_VENV))/bin:$(BARE_PATH) $(WHEEL_VENV)/bin/python -m pytest -q \
		-p no:cacheprovider $(WHEEL_TESTS)

test: test-rs lint test-py test-wheel

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
