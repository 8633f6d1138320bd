# coldmargin: `make app` serves the planner, `make test` runs every test (browser tests included).
# Both create .venv when it is missing or older than pyproject.toml and install the project into it.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed
DEMO ?= protocols/rigid-chamber-hold.yaml
export PIP_DISABLE_PIP_VERSION_CHECK := 1

.PHONY: app test lint bench chromium clean

$(STAMP): pyproject.toml
	@test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[test]'
	@touch $(STAMP)

# One kernel is pre-started by default (the first page opens in ~2 s). For a lab meeting, pre-start one
# per viewer: `make app POOL=10` (about 225 MB each; start the server a minute or two before people open
# the link); `POOL=0` for none.
app: $(STAMP)
	$(BIN)/coldmargin app --protocol $(DEMO) $(if $(POOL),--pool $(POOL))

# Debian's chromium for the browser tests (never a downloaded browser). As root it is installed with
# apt-get; otherwise we say how. In CI (CI=true) a missing browser fails the run.
chromium:
	@if [ ! -x /usr/bin/chromium ]; then \
	  if [ "$$(id -u)" = 0 ]; then \
	    echo "installing Debian's chromium for the browser tests"; \
	    DEBIAN_FRONTEND=noninteractive apt-get update -qq && \
	    DEBIAN_FRONTEND=noninteractive apt-get install -y -qq chromium fonts-dejavu-core >/dev/null; \
	  else \
	    echo "Debian's chromium is missing: run 'sudo apt-get install -y chromium' to run the browser tests"; \
	    if [ "$$CI" = "true" ]; then exit 1; fi; \
	  fi; \
	fi

lint: $(STAMP)
	$(BIN)/ruff check planner tests benchmarks

test: $(STAMP) chromium lint
	$(BIN)/python -m pytest

bench: $(STAMP)
	@for f in benchmarks/bench_*.py; do echo "== $$f"; $(BIN)/python $$f || exit 1; done

clean:
	rm -rf $(VENV) .pytest_cache .hypothesis test-output
