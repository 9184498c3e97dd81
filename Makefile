# Two commands do all set-up on a fresh machine:
#   make demo   the main job on the built-in demo scenario (writes demo-out/)
#   make test   the test suite
# Each creates the virtual environment .venv and installs what it needs on first use.

PYTHON ?= python3
VENV ?= .venv
PY := $(VENV)/bin/python
STAMP := $(VENV)/.installed
DEMO_OUT ?= demo-out

.PHONY: demo test lint bench clean

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip
	$(PY) -m pip install --quiet -e ".[test]"
	@bash tools/install-coastlines.sh
	@touch $(STAMP)

demo: $(STAMP)
	$(VENV)/bin/westerlies demo --out $(DEMO_OUT) --overwrite

test: $(STAMP)
	$(PY) -m pytest

lint: $(STAMP)
	$(VENV)/bin/ruff check lib tests benchmarks
	$(VENV)/bin/ruff format --check lib tests benchmarks

bench: $(STAMP)
	for f in benchmarks/bench_*.py; do $(PY) $$f || exit 1; done

clean:
	rm -rf $(VENV) $(DEMO_OUT) .pytest_cache
