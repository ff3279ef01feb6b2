# trailcast: two commands do the whole set-up on a fresh machine: `make run` and `make test`.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed
HOST ?= 127.0.0.1
PORT ?= 8000

.PHONY: install run test bench lint validate clean

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip

# Re-install whenever pyproject.toml changes.
$(STAMP): pyproject.toml | $(BIN)/python
	$(BIN)/python -m pip install --quiet -e '.[test]'
	touch $(STAMP)

install: $(STAMP)

run: $(STAMP)
	mkdir -p var
	$(BIN)/trailcast serve --host $(HOST) --port $(PORT)

# pytest exit code 5 means "no tests collected": that is a failure for us, never hidden.
# One pytest worker per core (pytest-xdist), each test file kept on one worker so that its
# module fixtures (forecasts, servers) run once; then, in one process, the tests marked
# `serial` (the OpenAPI fuzz test: its items share one node id, and xdist's file scheduling
# keys work by node id, so it would run one operation of 24).
test: $(STAMP)
	$(BIN)/python -m pytest -n auto --dist loadfile -m "not validation and not serial"
	$(BIN)/python -m pytest -m serial

# The hindcast catalogue, every row, on all cores (29 minutes on 2 cores with no parent history
# cached, 2026-12-05): writes validation/report/hindcast.{json,md,png,svg}; then the long class
# hindcasts (a few minutes).
validate: $(STAMP)
	$(BIN)/trailcast hindcast validation/hindcasts.json --out validation/report
	$(BIN)/python -m pytest -m validation tests/test_hindcast_classes.py

bench: $(STAMP)
	$(BIN)/python -m benchmarks

lint: $(STAMP)
	$(BIN)/ruff check dynamics service tests benchmarks
	$(BIN)/ruff format --check dynamics service tests benchmarks

clean:
	rm -rf $(VENV) build *.egg-info .pytest_cache
