# Cairn: `make demo` starts the demo portal on the embedded default; `make test` runs the suite.
PYTHON ?= python3.11
VENV := .venv
BIN := $(VENV)/bin
TEST_DATABASE_URL ?= postgres://postgres@127.0.0.1:5432/cairn
TEST_BROKER_URL ?= redis://127.0.0.1:6379/15
DEMO_SCALE ?= full

.PHONY: demo test lint install services clean-demo unit fast

# The developer loop (no services; neither changes `demo` or `test`):
#   make unit   the science's tests without Django (pytest-django switched off), seconds to minutes
#   make fast   unit + the portal's tests on the embedded SQLite, without the slow kinds
#               (real workers, PostgreSQL/Redis, the browser, new virtual environments)
FAST_MARKERS := not integration and not embedded and not browser and not venv

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)

$(VENV)/.installed: $(BIN)/python requirements.txt requirements-test.txt
	$(BIN)/pip install --quiet --upgrade pip
	$(BIN)/pip install --quiet -r requirements.txt -r requirements-test.txt
	touch $@

install: $(VENV)/.installed

demo: install
	$(BIN)/python manage.py migrate --noinput
	$(BIN)/python manage.py load_demo --scale $(DEMO_SCALE)
	$(BIN)/python manage.py serve_demo

services:
	bash .ci/services

test: install services
	bash .ci/browser
	$(BIN)/ruff check .
	TEST_DATABASE_URL=$(TEST_DATABASE_URL) TEST_BROKER_URL=$(TEST_BROKER_URL) BIN=$(BIN) \
	bash .ci/suite

unit: install
	$(BIN)/python -m pytest -q -p no:django tests/unit

fast: install
	DATABASE_URL= CELERY_BROKER_URL= $(BIN)/python -m pytest -q -m "$(FAST_MARKERS)" tests/unit tests/portal

lint: install
	$(BIN)/ruff check .

clean-demo:
	rm -rf var/cairn.sqlite3* var/blobs var/staging var/broker var/demo var/beat-schedule*
