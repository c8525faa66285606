# The only two set-up commands a fresh clone needs: `make demo` and `make test`.
PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed

.PHONY: demo test browser bench clean

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)

$(STAMP): pyproject.toml | $(BIN)/python
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[test]'
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/simloop demo --out results/demo

# The browser test renders the study report in headless Chromium (Debian's package). Installing it
# needs root; where it cannot be installed the test skips with the reason, except under CI=true.
test: $(STAMP) browser
	$(BIN)/python -m pytest -m "not slow" -q

browser:
	@command -v chromium >/dev/null 2>&1 || (apt-get update && DEBIAN_FRONTEND=noninteractive apt-get install -y chromium) \
		|| echo "make: chromium could not be installed; the report's browser test will be skipped"

bench: $(STAMP)
	$(BIN)/python benchmarks/bench_sweep.py
	$(BIN)/python benchmarks/bench_timing.py
	$(BIN)/python benchmarks/bench_study.py

clean:
	rm -rf $(VENV) results/demo
