# tunnelsmith: two commands set everything up on a machine with only Python 3.11.
#   make test   creates .venv, installs the project with its test extra, runs the tests
#   make demo   creates .venv, installs, runs the demo campaign and shows where results are
#   make bench  runs the benchmark harness (figures go to benchmarks/results/)
PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed-stamp

.PHONY: install test demo bench clean

install: $(STAMP)

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e ".[test,postgres]"
	touch $(STAMP)

test: $(STAMP)
	$(BIN)/python -m pytest -q

demo: $(STAMP)
	$(BIN)/tunnelsmith optimize campaigns/demo.toml --out runs/demo
	@echo
	@echo "Demo results are in runs/demo/:"
	@ls -1 runs/demo | sed 's/^/  runs\/demo\//'

bench: $(STAMP)
	$(BIN)/python benchmarks/run_all.py

clean:
	rm -rf $(VENV) runs .pytest_cache
