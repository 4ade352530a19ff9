# ohmgraph developer entry points. Everything installs into .venv from this project's own files.
PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed

.PHONY: demo test bench install clean

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip

$(STAMP): $(BIN)/python pyproject.toml
	$(BIN)/python -m pip install --quiet -e '.[test]'
	touch $(STAMP)

install: $(STAMP)

demo: $(STAMP)
	$(BIN)/ohmgraph demo

test: $(STAMP)
	$(BIN)/python -m pytest -q

bench: $(STAMP)
	$(BIN)/python -m pytest benchmarks -q -p no:cacheprovider -o python_files='bench_*.py' --benchmark-enable --benchmark-columns=min,median,max,rounds -s

clean:
	rm -rf $(VENV) build *.egg-info .pytest_cache .benchmarks
