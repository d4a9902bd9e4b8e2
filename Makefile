# fringebench: every target creates the environment first when it is missing.
PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed
PRESET ?= default
PORT   ?= 5006

.PHONY: install serve test test-fast bench lint format clean

$(STAMP): pyproject.toml
	test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[test]'
	touch $(STAMP)

install: $(STAMP)

serve: $(STAMP)
	$(BIN)/fringebench serve --port $(PORT) --preset $(PRESET)

test: $(STAMP)
	$(BIN)/python -m pytest

test-fast: $(STAMP)
	$(BIN)/python -m pytest -m "not browser and not slow"

bench: $(STAMP)
	$(BIN)/fringebench bench

lint: $(STAMP)
	$(BIN)/ruff check .
	$(BIN)/ruff format --check .

format: $(STAMP)
	$(BIN)/ruff check --fix .
	$(BIN)/ruff format .

clean:
	rm -rf $(VENV) .pytest_cache .ruff_cache .hypothesis tests/artifacts
