# fleetsvc: two commands for a newcomer — `make demo` and `make test`.
PY      ?= python3
VENV    := .venv
BIN     := $(VENV)/bin
STAMP   := $(VENV)/.installed
PGSOCK  ?= /var/run/postgresql
TEST_DATABASE_URL ?= postgres:///fleetsvc?host=$(PGSOCK)
TEST_REDIS_URL    ?= redis://127.0.0.1:6379/7
DEMO_PASSWORD     ?= demo-pass-2026

.PHONY: venv demo test lint services bench bench-load clean

$(STAMP): pyproject.toml
	test -x $(BIN)/python || $(PY) -m venv $(VENV)
	$(BIN)/pip install -q --upgrade pip
	$(BIN)/pip install -q -e ".[dev]"
	touch $(STAMP)

venv: $(STAMP)

## make demo: SQLite, in-process jobs, demo data, serve on 127.0.0.1:8000
demo: $(STAMP)
	DEBUG=1 $(BIN)/python manage.py migrate --noinput
	DEBUG=1 $(BIN)/python manage.py build_demo --if-missing --password $(DEMO_PASSWORD)
	@echo "Serving the demo on http://127.0.0.1:8000/ (Ctrl-C to stop)"
	DEBUG=1 $(BIN)/python manage.py runserver 127.0.0.1:8000

## make services: install (apt) and start PostgreSQL, Redis and the test tools if missing
services:
	bash deploy/ensure-services.sh

## make test: everything against PostgreSQL and Redis with a real Celery worker
test: $(STAMP) services
	$(BIN)/ruff check .
	DATABASE_URL='$(TEST_DATABASE_URL)' REDIS_URL='$(TEST_REDIS_URL)' SECRET_KEY=test-only-key \
		$(BIN)/pytest

lint: $(STAMP)
	$(BIN)/ruff check .

bench: $(STAMP)
	$(BIN)/pip install -q -e ".[dev,bench]"
	$(BIN)/python bench/bench_corner.py

## make bench-load: demo in a dedicated PostgreSQL database, gunicorn + worker + own Redis on
## loopback, locust headless at 10 and 50 users (about 5 minutes); figures in the README "Load"
bench-load: $(STAMP) services
	$(BIN)/pip install -q -e ".[dev,bench]"
	SECRET_KEY=bench-only-key $(BIN)/python bench/bench_load.py --pg-host $(PGSOCK)

## make bench-fleet: its own PostgreSQL database (fleetsvc_fleetscale), 10 000 invented vehicles,
## a real 2-process Celery worker on Redis db 9; prints the fleet-scale table (README)
bench-fleet: $(STAMP) services
	$(BIN)/python bench/bench_fleet.py $(BENCH_FLEET_ARGS)

clean:
	rm -rf $(VENV) var
