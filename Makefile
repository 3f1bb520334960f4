# The habits everyone shares: make demo, make test, make lint, make bench.
PYTHON ?= python3
VENV ?= .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed-stamp
DEMO_EVENTS ?= 100000

.PHONY: install demo demo-cli test lint format bench bench-smoke clean

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[test,bench]'
	touch $(STAMP)

install: $(STAMP)

demo: install
	$(BIN)/windvane demo --events $(DEMO_EVENTS)

demo-cli: install
	$(BIN)/python -m windvane_demo.generate --seed 7 --events $(DEMO_EVENTS) \
		--out demo/out/demo.jsonl.gz --lookups-out demo/out/lookups.jsonl
	$(BIN)/windvane check featuredefs
	head -n 4 demo/out/lookups.jsonl | $(BIN)/windvane features --store memory:// \
		--replay demo/out/demo.jsonl.gz --rejects demo/out/rejects.jsonl --pretty

lint: install
	$(BIN)/ruff check service demo tests bench
	$(BIN)/ruff format --check service demo tests bench

test: lint
	$(BIN)/pytest

# Every benchmark against its floor, under 10 minutes; the report goes to bench/results/.
bench: install
	$(BIN)/python -m bench.run

# Tiny sizes, no targets judged: CI runs this so the benchmarks cannot rot.
bench-smoke: install
	$(BIN)/python -m bench.run --smoke

format: install
	$(BIN)/ruff check --fix service demo tests bench
	$(BIN)/ruff format service demo tests bench

clean:
	rm -rf demo/out .pytest_cache .ruff_cache .hypothesis
