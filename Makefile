# Short tasks for contributors; see DEVELOPERS.md.
VENV ?= .venv
PY := $(VENV)/bin/python

.PHONY: setup test test-all lint bench demo

setup:
	python3 -m venv $(VENV) && $(PY) -m pip install -q -e ".[dev]"

test:
	$(PY) -m pytest -m "not slow" -q --durations=10

test-all:
	$(PY) -m pytest -q

lint:
	$(VENV)/bin/ruff check sweeper tests benchmarks && $(VENV)/bin/ruff format --check sweeper tests benchmarks && $(VENV)/bin/mypy

bench:
	$(PY) benchmarks/overhead.py && $(PY) benchmarks/scaling.py && $(PY) benchmarks/demo_scaling.py && $(PY) benchmarks/report_size.py

demo:
	$(VENV)/bin/sweeper run search_spaces/adding_lstm_demo.toml
