# hashaudit — developer commands. `make demo` and `make test` create the virtualenv when it is missing.
PYTHON ?= python3
VENV   ?= .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed
DEMO   := $(VENV)/.demo

.PHONY: demo test test-all check bench sample clean

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip

# the demo needs the package alone; the tests need the test, lint, database and Dask extras too
$(DEMO): $(BIN)/python pyproject.toml
	$(BIN)/python -m pip install --quiet -e .
	@touch $(DEMO)

$(STAMP): $(BIN)/python pyproject.toml
	$(BIN)/python -m pip install --quiet -e ".[test,dev,sql,dask]"
	@touch $(STAMP) $(DEMO)

# Audit the bundled sample keys; exit code 1 (a check failed) is an expected outcome of the demo.
demo: $(DEMO)
	@mkdir -p reports
	$(BIN)/hashaudit audit sample_keys/crate_ids.txt --key-format int \
		-H identity -H fibonacci -H murmur3_32 -H xxh3_64 -m 2^12 -m 4093 -s mask -s high -s mod \
		--json reports/demo-crates.json || test $$? -eq 1
	$(BIN)/hashaudit audit sample_keys/orders.txt -H poly31 -H djb2 -H fnv1a_32 -H murmur3_32 -H xxh3_64 \
		--json reports/demo.json --html reports/demo.html --markdown reports/demo.md || test $$? -eq 1
	$(BIN)/hashaudit gate || test $$? -eq 1
	@echo "reports written: reports/demo.json reports/demo.html reports/demo.md reports/demo-crates.json"

test: $(STAMP)
	$(BIN)/python -m pytest -q

test-all: $(STAMP)
	$(BIN)/python -m pytest -q -m ""

check: $(STAMP)
	$(BIN)/ruff format --check hashaudit tests bench sample_keys
	$(BIN)/ruff check hashaudit tests bench sample_keys
	$(BIN)/mypy hashaudit

bench: $(STAMP)
	$(BIN)/python bench/bench_audit.py

sample: $(STAMP)
	$(BIN)/python sample_keys/generate.py

clean:
	rm -rf $(VENV) build *.egg-info .pytest_cache .ruff_cache .mypy_cache
