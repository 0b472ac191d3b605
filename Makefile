# ledgerband — every target sets up (or refreshes) the local virtual environment from pyproject.toml first.
PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed-$(shell cat pyproject.toml | sha256sum | cut -c1-16)

.DEFAULT_GOAL := help
.PHONY: help venv demo test test-all test-crash test-scale bench lint format clean browser

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

test: venv ## lint, then run the default test suite (unit, sql, reference, integration; no benchmarks)
	@$(MAKE) --no-print-directory lint
	$(BIN)/python -m pytest

test-crash: venv ## kill runs at each stage boundary and rerun them (~8 min; CI runs it after make test)
	$(BIN)/python -m pytest tests/crash -m crash

test-scale: venv ## the month on buckets and on a local 2-worker Dask cluster, equal to one build (~3 min; CI runs it)
	$(BIN)/python -m pytest tests/scale -m scale

bench: venv ## benchmark the monthly flow at 10k and 100k customers beside plain DuckDB (BENCH_SIZES, BENCH_MONTHS)
	$(BIN)/python -m pytest tests/bench -m bench -s -p no:cacheprovider

lint: venv ## ruff (style, imports, bugbear) and sqlfluff (the DuckDB SQL under warehouse/)
	$(BIN)/ruff check flows tasks tests
	$(BIN)/sqlfluff lint warehouse

format: venv ## format and sort imports; fix the SQL layout (review the diff: `git diff warehouse`)
	$(BIN)/ruff check --fix --select I flows tasks tests
	$(BIN)/ruff format flows tasks tests
	$(BIN)/sqlfluff fix warehouse

clean: ## remove the local state folder (warehouse, published copy, reports, demo files)
	rm -rf .ledgerband
