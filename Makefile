# The two commands a new user needs: `make demo` and `make test`. Both create .venv when missing.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed
WORKSPACE ?= demo-workspace

.PHONY: demo test lint bench clean

$(STAMP): pyproject.toml
	@test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[test,dask]'
	@touch $(STAMP)

demo: $(STAMP)
	$(BIN)/dyadcast demo --workspace $(WORKSPACE)

lint: $(STAMP)
	$(BIN)/ruff check .

test: $(STAMP)
	$(BIN)/ruff check .
	$(BIN)/python -m pytest -q

bench: $(STAMP)
	$(BIN)/python bench/run_bench.py

clean:
	rm -rf $(WORKSPACE) .pytest_cache .ruff_cache
