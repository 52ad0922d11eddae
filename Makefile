# Two commands set everything up on a fresh Debian machine: `make demo` and `make test`.
# Each creates .venv, installs the package with its test extras, and installs the Debian
# tools it needs (graphviz, ngspice) when their binaries are missing.

PYTHON ?= $(shell command -v python3.11 || command -v python3.12 || command -v python3)
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed-stamp

.PHONY: demo test tools lint bench clean

$(STAMP): pyproject.toml
	@test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[test]'
	@touch $(STAMP)

tools:
	@sh tools/ensure-debian-tools.sh dot:graphviz ngspice:ngspice

test: $(STAMP) tools
	$(BIN)/python -m pytest
	$(BIN)/ohmtrail check rulesets/

demo: $(STAMP) tools
	$(BIN)/ohmtrail lint rulesets/

lint: $(STAMP)
	$(BIN)/ohmtrail lint rulesets/

bench: $(STAMP) tools
	@for b in benchmarks/bench_*.py; do echo "== $$b"; $(BIN)/python $$b || exit 1; done

clean:
	rm -rf $(VENV) .pytest_cache .hypothesis demo-out .ohmtrail-cache
