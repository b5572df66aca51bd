# Set-up and the two everyday commands. `make demo` and `make test` each create
# the virtual environment and install nstress into it on first use.
PYTHON ?= python3
VENV ?= .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: demo test test-slow lint install

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e ".[all]"
	touch $(STAMP)

install: $(STAMP)

# DEMO_ARGS passes options through, e.g. make demo DEMO_ARGS="--draws 200 --tune 200"
demo: $(STAMP)
	$(BIN)/nstress demo --out demo_run $(DEMO_ARGS)

test: $(STAMP)
	$(BIN)/python -m pytest -q

test-slow: $(STAMP)
	$(BIN)/python -m pytest -q -m slow

lint: $(STAMP)
	$(BIN)/ruff check nstress tests benchmarks
