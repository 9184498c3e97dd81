# Two commands do all set-up on a fresh machine:
#   make demo   the main job on the built-in demo scenario (writes demo-out/)
#   make test   the test suite
# Each creates the virtual environment .venv and installs what it needs on first use.

PYTHON ?= python3
VENV ?= .venv
PY := $(VENV)/bin/python
STAMP := $(VENV)/.installed
DEMO_OUT ?= demo-out

.PHONY: demo test test-oldest lint bench clean

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

# The lowest supported versions (requirements-oldest.txt) in their own environment.
test-oldest:
	$(PYTHON) -m venv .venv-oldest
	.venv-oldest/bin/python -m pip install --quiet -r requirements-oldest.txt
	.venv-oldest/bin/python -m pip install --quiet --no-deps -e .
	.venv-oldest/bin/python -m pytest

lint: $(STAMP)
	$(VENV)/bin/ruff check lib tests benchmarks
	$(VENV)/bin/ruff format --check lib tests benchmarks

bench: $(STAMP)
	for f in benchmarks/bench_*.py; do $(PY) $$f || exit 1; done

clean:
	rm -rf $(VENV) .venv-oldest $(DEMO_OUT) .pytest_cache
