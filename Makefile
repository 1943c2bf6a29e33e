# Scalewright: bare `make` runs the tests.
PY      ?= python3
VENV    := .venv
BIN     := $(VENV)/bin
STAMP   := $(VENV)/.installed
PORT    ?= 8765
DATA    ?= data

.DEFAULT_GOAL := test
.PHONY: install demo test test-fast bench lint clean

$(STAMP): pyproject.toml
	test -x $(BIN)/python || $(PY) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[test]'
	touch $(STAMP)

install: $(STAMP)

demo: $(STAMP)
	$(BIN)/scalewright serve --demo --port $(PORT) --data-dir $(DATA)

test: $(STAMP)
	$(BIN)/python -m pytest -q

test-fast: $(STAMP)
	$(BIN)/python -m pytest -q -m "not browser and not slow"

bench: $(STAMP)
	$(BIN)/python -m bench

lint: $(STAMP)   # ruff on server, tests and bench; mypy on server/stats and server/analysis ([tool.mypy])
	$(BIN)/ruff check server tests bench
	$(BIN)/mypy

clean:
	rm -rf $(VENV) .pytest_cache
