# ledgerband — every target sets up (or refreshes) the local virtual environment from pyproject.toml first.
PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed-$(shell cat pyproject.toml | sha256sum | cut -c1-16)

.DEFAULT_GOAL := help
.PHONY: help venv demo test test-integration test-crash test-scale check bench lint format clean browser

help: ## list the targets
	@grep -E '^[a-z-]+:.*## ' $(MAKEFILE_LIST) | awk -F':.*## ' '{printf "  make %-10s %s\n", $$1, $$2}'

$(STAMP): pyproject.toml
	@test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	@echo "installing ledgerband and its pinned dependencies into $(VENV) (log: $(VENV)/pip-install.log) …"
	@$(BIN)/python -m pip install --disable-pip-version-check -e '.[dev]' > $(VENV)/pip-install.log 2>&1 \
		|| { tail -40 $(VENV)/pip-install.log; exit 1; }
	@rm -f $(VENV)/.installed-*
	@touch $@

venv: $(STAMP) ## create or refresh .venv from pyproject.toml

demo: venv ## install, generate demo extracts, run the monthly flow, write the report
	$(BIN)/ledgerband demo

browser: ## install Debian's chromium and chromium-driver for the report's browser test (needs root; skipped if present)
	@test -x /usr/bin/chromium -a -x /usr/bin/chromedriver \
		|| (DEBIAN_FRONTEND=noninteractive apt-get install -y -q chromium chromium-driver > /tmp/ledgerband-apt.log 2>&1 \
		|| (echo "could not install chromium (see /tmp/ledgerband-apt.log): the browser test will be skipped"; true))

test: venv ## the fast loop (~2 min): lint, then unit, SQL and reference tests (tests/unit, sql, reference)
	@$(MAKE) --no-print-directory lint
	$(BIN)/python -m pytest -m "unit or sql or reference"

test-integration: venv ## whole flows, a real Prefect server, the built wheel (tests/integration, package; ~5 min; CI)
	$(BIN)/python -m pytest -m "integration or package"

test-crash: venv ## kill runs at each stage boundary and rerun them (tests/crash; ~13 min; CI)
	$(BIN)/python -m pytest -m crash

test-scale: venv ## the month on buckets and on a local 2-worker Dask cluster, equal to one build (tests/scale; ~3 min; CI)
	$(BIN)/python -m pytest -m scale

check: test test-integration test-crash test-scale ## everything CI runs (after `make browser`)

bench: venv ## benchmark the monthly flow at 10k and 100k customers beside plain DuckDB (BENCH_SIZES, BENCH_MONTHS, BENCH_MONTHLY)
	$(BIN)/python -m pytest -m bench -s -p no:cacheprovider

lint: venv ## ruff (style, imports, bugbear) and sqlfluff (the DuckDB SQL under warehouse/)
	$(BIN)/ruff check flows tasks tests
	$(BIN)/sqlfluff lint warehouse

format: venv ## format and sort imports; fix the SQL layout (review the diff: `git diff warehouse`)
	$(BIN)/ruff check --fix --select I flows tasks tests
	$(BIN)/ruff format flows tasks tests
	$(BIN)/sqlfluff fix warehouse

clean: ## remove the local state folder (warehouse, published copy, reports, demo files)
	rm -rf .ledgerband
