# Two commands on a fresh machine: `make demo` and `make test`.
PYTHON ?= python3
VENV ?= .venv
BIN := $(VENV)/bin

.PHONY: demo test fuzz bench install install-test lint clean

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip

# Stamps re-run the install whenever pyproject.toml changes.
$(VENV)/.installed: pyproject.toml | $(BIN)/python
	$(BIN)/python -m pip install --quiet -e .
	touch $@

$(VENV)/.installed-test: pyproject.toml | $(BIN)/python
	$(BIN)/python -m pip install --quiet -e '.[test]'
	touch $@ $(VENV)/.installed

install: $(VENV)/.installed
install-test: $(VENV)/.installed-test

demo: install
	$(BIN)/benchfit demo

test: install-test
	$(BIN)/python -m pytest

fuzz: install-test
	HYPOTHESIS_PROFILE=fuzz $(BIN)/python -m pytest tests -m fuzz -p no:cacheprovider

bench: install-test
	for f in benchmarks/*.py; do echo "== $$f"; OPENBLAS_NUM_THREADS=1 OMP_NUM_THREADS=1 $(BIN)/python $$f || exit 1; done

lint: install-test
	$(BIN)/python -m pip install --quiet ruff
	$(BIN)/ruff check benchfit tests

clean:
	rm -rf $(VENV) build *.egg-info .pytest_cache
