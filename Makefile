# One runner for people and CI. Every target installs what it needs into .venv/.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: demo test bench lint clean screenshots

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip

$(STAMP): pyproject.toml | $(BIN)/python
	$(BIN)/python -m pip install --quiet -e '.[test,dev,postgres]'
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/python examples/demo.py

# One BLAS thread per process in tests: several test processes share two cores, and
# threaded small matrix products then run several times slower, not faster.
test: $(STAMP)
	OPENBLAS_NUM_THREADS=1 OMP_NUM_THREADS=1 $(BIN)/python -m pytest -q

bench: $(STAMP)
	$(BIN)/python benchmarks/run_all.py

# The README's pictures of the web view (docs/*.png), from an invented keep; needs chromium.
screenshots: $(STAMP)
	$(BIN)/python docs/screenshots.py

lint: $(STAMP)
	$(BIN)/ruff check jobkeeper tests benchmarks examples docs conftest.py
	$(BIN)/ruff format --check jobkeeper tests benchmarks examples docs conftest.py
	$(BIN)/mypy
	$(BIN)/lint-imports --no-cache
	$(BIN)/pylint jobkeeper tests

clean:
	rm -rf $(VENV) .pytest_cache .mypy_cache .ruff_cache
