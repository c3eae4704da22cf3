# Two entry points for a fresh machine: `make demo` and `make test`.
# Both create .venv with the machine's python3 (3.11+) and install what they need.
PY ?= python3
VENV := .venv
BIN := $(VENV)/bin

$(BIN)/.installed: pyproject.toml
	$(PY) -m venv $(VENV)
	$(BIN)/pip install --quiet --upgrade pip
	$(BIN)/pip install --quiet -e '.[test,dev]'
	touch $@

.PHONY: demo test lint bench
demo: $(BIN)/.installed
	$(BIN)/stackledger demo

test: $(BIN)/.installed
	@$(BIN)/python -m pytest -q; rc=$$?; \
	if [ $$rc -eq 5 ]; then echo "pytest collected no tests: that is a failure"; fi; exit $$rc

lint: $(BIN)/.installed
	$(BIN)/ruff check .
	$(BIN)/mypy app/overlay

bench: $(BIN)/.installed
	$(BIN)/python benchmarks/core.py
	$(BIN)/python benchmarks/ingest.py
	$(BIN)/python benchmarks/holds.py
	$(BIN)/python benchmarks/pages.py
	$(BIN)/python benchmarks/metrics.py
	$(BIN)/python benchmarks/analysis.py
