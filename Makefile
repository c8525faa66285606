# The only two set-up commands a fresh clone needs: `make demo` and `make test`.
PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed

.PHONY: demo test bench clean

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)

$(STAMP): pyproject.toml | $(BIN)/python
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[test]'
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/simloop demo --out results/demo

test: $(STAMP)
	$(BIN)/python -m pytest -m "not slow" -q

bench: $(STAMP)
	$(BIN)/python benchmarks/bench_sweep.py
	$(BIN)/python benchmarks/bench_timing.py

clean:
	rm -rf $(VENV) results/demo
