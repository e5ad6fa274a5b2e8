# Recap Scheduler: the two commands of the README, and the rest of the chores.
PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed

.PHONY: run test test-fast bench install worker beat web check-deploy clean

$(STAMP): pyproject.toml
	test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install -q --upgrade pip
	$(BIN)/python -m pip install -q -e ".[test]"
	touch $(STAMP)

install: $(STAMP)

## make run: install, migrate, load the demo fleet if the database is empty,
## print the demo logins, then serve http://127.0.0.1:8000 with a background
## worker and its schedule (SQLite, no Redis needed).
run: $(STAMP)
	mkdir -p var/mail var/celery/queue var/celery/processed var/celery/control
	DEBUG=true $(BIN)/python manage.py migrate --noinput
	DEBUG=true $(BIN)/python manage.py demo_setup
	DEBUG=true bash -c 'trap "trap - INT TERM EXIT; kill 0" INT TERM EXIT; \
	  $(BIN)/celery -A config worker -B --pool=solo --loglevel=WARNING & \
	  $(BIN)/python manage.py runserver 127.0.0.1:8000'

## make test: install and run the whole suite (SQLite; Redis tests use a
## server on 127.0.0.1:6379 or a throwaway redis-server, else are skipped).
test: $(STAMP)
	bash .ci/pytest-with-services

test-fast: $(STAMP)
	$(BIN)/python -m pytest -x -q

## make bench: build a 10,000-unit synthetic fleet (once) and print the
## life engine's speed and memory figures against the budgets.
bench: $(STAMP)
	bash .ci/bench

worker: $(STAMP)
	$(BIN)/celery -A config worker --loglevel=INFO

beat: $(STAMP)
	$(BIN)/celery -A config beat --loglevel=INFO

web: $(STAMP)
	$(BIN)/gunicorn -c python:config.gunicorn config.wsgi --bind 0.0.0.0:8000 --workers 3

check-deploy: $(STAMP)
	DEBUG=false SECRET_KEY=$$(head -c 48 /dev/urandom | base64) ALLOWED_HOSTS=recap.example \
	  RECAP_ALLOW_DEV_KEY=false $(BIN)/python manage.py check --deploy --fail-level WARNING

clean:
	rm -rf var/celery var/mail var/test-*.sqlite3
