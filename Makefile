# Two entry points for a fresh machine with Python 3.11+:
#   make demo   set up .venv and run the nightly job on data_demo/ (outputs under reports/demo)
#   make test   set up .venv and run the test suite
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed
SPARK_STAMP := $(VENV)/.installed-spark

.PHONY: demo test setup bench clean readme-charts

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[test]'
	@# the headless browser of tests/test_html_report.py (Debian's chromium), installed when missing and we
	@# are root with apt-get; otherwise skipped quietly (the browser tests then skip, or fail when CI is set)
	@if [ ! -x /usr/bin/chromium ] && command -v apt-get >/dev/null 2>&1 && [ "$$(id -u)" = 0 ]; then \
		echo "installing chromium (apt-get) for the report.html browser tests"; \
		{ apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq chromium >/dev/null; } \
			|| echo "chromium could not be installed: the report.html browser tests will skip (or fail under CI)"; \
	fi
	touch $(STAMP)

setup: $(STAMP)

# the tests also need the Spark engine's extra (pyspark, a 456 MB download, and sqlglot); the demo does not
$(SPARK_STAMP): $(STAMP)
	$(BIN)/python -m pip install --quiet -e '.[test,spark]'
	touch $(SPARK_STAMP)

demo: $(STAMP)
	$(BIN)/warranty-forecast run --shipments data_demo/shipments.parquet --claims data_demo/claims.csv --out reports/demo

# the charts shown in the README (reports/charts/): the demo run as the nightly job makes them, with an
# earlier month-end run first so the finance chart has a movement since the last run
readme-charts: $(STAMP)
	rm -rf build/readme-charts
	$(BIN)/warranty-forecast run --shipments data_demo/shipments.parquet --claims data_demo/claims.csv --out build/readme-charts --as-of 2026-10-31 --no-charts
	$(BIN)/warranty-forecast run --shipments data_demo/shipments.parquet --claims data_demo/claims.csv --out build/readme-charts
	mkdir -p reports/charts
	rm -f reports/charts/*.png
	cp build/readme-charts/latest/*.png reports/charts/

# one test process per core (pytest-xdist); a test file stays in one process, so a module's fixtures (the
# Spark session, the demo runs) are made once per process that needs them
test: $(SPARK_STAMP)
	$(BIN)/python -m pytest -q -n auto --dist loadfile

clean:
	rm -rf $(VENV) .venv-bench reports/demo

# make bench   benchmark of the grouped fit against per-unit fits (scipy, lifelines); prints a table.
# lifelines pins pandas < 3, so it gets its own venv (.venv-bench); the project declares pandas >= 2.2.
BENCH_VENV := .venv-bench
BENCH_STAMP := $(BENCH_VENV)/.installed
BENCH_ARGS ?=

$(BENCH_STAMP): pyproject.toml
	$(PYTHON) -m venv $(BENCH_VENV)
	$(BENCH_VENV)/bin/python -m pip install --quiet --upgrade pip
	$(BENCH_VENV)/bin/python -m pip install --quiet -e . 'pandas<3' lifelines
	touch $(BENCH_STAMP)

bench: $(BENCH_STAMP)
	$(BENCH_VENV)/bin/python -m warranty_forecast.tools.bench $(BENCH_ARGS)
