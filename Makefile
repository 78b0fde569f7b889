# drawyard: the two set-up commands are `make demo` and `make test`.
PYTHON ?= python3
VENV   := .venv
PY     := $(VENV)/bin/python
STAMP  := $(VENV)/.installed

.PHONY: venv test bench soak demo lint services clean

# Debian ships Python's venv support separately (python3-venv): install it when root may, else say so.
$(STAMP): pyproject.toml
	@if ! $(PYTHON) -m venv $(VENV) >/dev/null 2>&1; then \
	  rm -rf $(VENV); \
	  if [ "$$(id -u)" -eq 0 ] && command -v apt-get >/dev/null 2>&1; then \
	    echo "installing python3-venv from Debian's packages"; \
	    apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq python3-venv >/dev/null; \
	    $(PYTHON) -m venv $(VENV); \
	  else \
	    echo "Python cannot create a virtual environment here; install python3-venv" \
	         "(sudo apt-get install python3-venv) and run make again." >&2; exit 1; \
	  fi; \
	fi
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

# The load run: 200 readers for 60 s while jobs run, then 500 jobs in a burst (tests/load/soak.py).
soak: $(STAMP)
	bash tests/harness/install_services.sh
	$(PY) -m tests.load.soak

demo: $(STAMP)
	$(PY) -m service.demo

clean:
	rm -rf $(VENV) var .pytest_cache
