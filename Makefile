# `make demo` and `make test` bootstrap .venv themselves on a fresh machine.
PYTHON ?= python3
VENV   ?= .venv
PY     := $(VENV)/bin/python
STAMP  := $(VENV)/.installed

.PHONY: demo test lint bench judge clean

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(PY) -m pip install -q --upgrade pip
	$(PY) -m pip install -q -e '.[test,bench]'
	touch $(STAMP)

demo: $(STAMP)
	$(VENV)/bin/fogwatch demo

test: $(STAMP)
	$(PY) -m ruff check notifier tests $(wildcard bench)
	$(PY) -m pytest -q -p no:cacheprovider --doctest-modules notifier tests

lint: $(STAMP)
	$(PY) -m ruff check notifier tests $(wildcard bench)
	$(PY) -m ruff format --check notifier tests $(wildcard bench)
	$(PY) -m mypy notifier

bench: $(STAMP)
	$(PY) bench/run.py

# the rules on real station years; downloads two packages once (bench/README.md).
# make judge JUDGE_ARGS="--out /tmp/judge.json" also writes the scores as JSON
judge: $(STAMP)
	$(PY) bench/stations.py $(JUDGE_ARGS)

clean:
	rm -rf $(VENV) fogwatch-demo .pytest_cache
