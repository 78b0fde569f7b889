# drawyard: the two set-up commands are `make demo` and `make test`.
PYTHON ?= python3
VENV   := .venv
PY     := $(VENV)/bin/python
STAMP  := $(VENV)/.installed

.PHONY: venv test bench demo lint services clean

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip
	$(PY) -m pip install --quiet -e '.[test]'
	touch $(STAMP)

venv: $(STAMP)

# Installs Redis and PostgreSQL from Debian's packages when missing (tests/harness/install_services.sh),
# then pytest starts private instances on free ports and stops them at the end.
test: $(STAMP)
	bash tests/harness/install_services.sh
	bash tests/harness/install_browser.sh
	$(PY) -m pytest -q -ra --durations=15 -p no:cacheprovider tests

lint: $(STAMP)
	$(VENV)/bin/ruff check service worker schemas tests

bench: $(STAMP)
	$(PY) -m tests.bench

demo: $(STAMP)
	$(PY) -m service.demo

clean:
	rm -rf $(VENV) var .pytest_cache
