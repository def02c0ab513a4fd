# Two set-up commands: `make demo` and `make test`. Both create .venv if missing.
PY ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: demo test bench lint clean

$(BIN)/python:
	$(PY) -m venv $(VENV)

$(STAMP): pyproject.toml | $(BIN)/python
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[test]'
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/fishway demo

test: $(STAMP)
	$(BIN)/python -m pytest -q

bench: $(STAMP)
	@for f in tests/bench/bench_*.py; do echo "== $$f"; $(BIN)/python $$f || exit 1; done

lint: $(STAMP)
	$(BIN)/ruff check ops_logic db simulator dashboard tests

clean:
	rm -rf $(VENV) var build *.egg-info
