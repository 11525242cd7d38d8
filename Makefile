# Everyday commands. `make check` is what .ci/run runs besides the README's
# install-and-test command.

PYTHON ?= python3

.PHONY: develop test rust-test lint fmt check demo

develop:            ## build the extension in place (release) and install editable
	$(PYTHON) -m pip install --no-build-isolation -e '.[test,dev]'

test:               ## the Python test-suite
	$(PYTHON) -m pytest

rust-test:          ## the core's unit tests
	cargo test -p eqbatch-core

lint:               ## formatting, lints and types, Rust and Python
	cargo fmt --all --check
	cargo clippy --workspace --all-targets -- -D warnings
	$(PYTHON) -m ruff check python tests bench examples
	$(PYTHON) -m ruff format --check python tests bench examples
	$(PYTHON) -m mypy python/eqbatch

fmt:                ## apply the formatters
	cargo fmt --all
	$(PYTHON) -m ruff format python tests bench examples

check: rust-test lint

demo:
	eqbatch demo
