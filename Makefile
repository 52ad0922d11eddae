# Two commands set everything up on a fresh Debian machine: `make demo` and `make test`.
# Each creates .venv, installs the package with its test extras, and installs the Debian
# tools it needs (graphviz, ngspice) when their binaries are missing.

PYTHON ?= $(shell command -v python3.11 || command -v python3.12 || command -v python3)
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed-stamp

.PHONY: demo test tools postgres postgres-stop lint bench fuzz clean

$(STAMP): pyproject.toml
	@test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[test]'
	@touch $(STAMP)

tools:
	@sh tools/ensure-debian-tools.sh dot:graphviz ngspice:ngspice

# The PostgreSQL store tests need a server: tools/ensure-postgres.sh starts a throwaway one on
# 127.0.0.1 (installing Debian's postgresql when missing) and prints its URL. Without one they
# skip locally and fail under CI=true. pytest's exit 5 (no tests collected) is not a failure.
test: $(STAMP) tools
	$(BIN)/python -m mypy assistant
	$(BIN)/ohmtrail check rulesets/
	@url="$${OHMTRAIL_TEST_PG_URL:-$$(sh tools/ensure-postgres.sh)}"; \
	OHMTRAIL_TEST_PG_URL="$$url" $(BIN)/python -m pytest; rc=$$?; \
	if [ $$rc -eq 5 ]; then echo "pytest collected no tests"; rc=0; fi; exit $$rc

postgres:
	@sh tools/ensure-postgres.sh

postgres-stop:
	@sh tools/ensure-postgres.sh stop

# Long fuzz runs (hypothesis with a large example budget); they print counts tried and failures.
# FUZZ_EXAMPLES sets the budget per target.
fuzz: $(STAMP)
	@for f in benchmarks/fuzz_*.py; do echo "== $$f"; $(BIN)/python $$f || exit 1; done

# The demo: a simulated session on the stop lamps of fleet van CV2-07 (an invented Larkspur CV-2
# courier van whose left stop lamp is dim), printed as the technician sees it; then its trail,
# claim reports and sealed export, all under demo-out/.
DEMO_ID := cv2-07-left-dim
DEMO_DB := sqlite:///demo-out/sessions.db

demo: $(STAMP) tools
	$(BIN)/ohmtrail lint rulesets/
	@mkdir -p demo-out && rm -f demo-out/sessions.db demo-out/sessions.db-wal demo-out/sessions.db-shm
	$(BIN)/ohmtrail diagnose rulesets/lamp/stop_lamps.yaml --simulate lamp_left.high_resistance --seed 7 \
		--context docs/examples/courier-van-left-dim.yaml --id $(DEMO_ID) --db $(DEMO_DB)
	$(BIN)/ohmtrail trail $(DEMO_ID) --db $(DEMO_DB) -o demo-out/$(DEMO_ID)-trail.svg
	$(BIN)/ohmtrail report $(DEMO_ID) --db $(DEMO_DB) -o demo-out/$(DEMO_ID)-report.pdf
	$(BIN)/ohmtrail report $(DEMO_ID) --db $(DEMO_DB) --format html -o demo-out/$(DEMO_ID)-report.html
	$(BIN)/ohmtrail export $(DEMO_ID) --db $(DEMO_DB) -o demo-out/$(DEMO_ID)-export.json
	$(BIN)/ohmtrail verify demo-out/$(DEMO_ID)-export.json
	@echo "Demo files in demo-out/: sessions.db (the session store), the trail (SVG), the claim report (PDF, HTML), the sealed export (JSON)"

lint: $(STAMP)
	$(BIN)/ohmtrail lint rulesets/

bench: $(STAMP) tools
	@for b in benchmarks/bench_*.py; do echo "== $$b"; $(BIN)/python $$b || exit 1; done

clean:
	rm -rf $(VENV) .pytest_cache .hypothesis demo-out .ohmtrail-cache
