# Harken: two commands on a fresh machine.
#   make demo   generate the demo scenario, ingest it, build the reference, serve the dashboard on it
#   make test   run the whole test suite
# The Makefile makes .venv and installs everything itself.

PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.harken-installed
DEMO_DIR ?= demo_out

.PHONY: all install demo test bench clean

all: test

$(STAMP): pyproject.toml
	test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[test]'
	touch $(STAMP)

install: $(STAMP)

demo: $(STAMP)
	$(BIN)/harken demo --out $(DEMO_DIR)
	$(BIN)/harken serve --store $(DEMO_DIR)/harken.db --host 127.0.0.1 --port 8050 --open-reading

# The linter first (configured in pyproject.toml); then pytest, which exits 5 when it collected no test: that is
# a failure here, not a pass.
test: $(STAMP)
	$(BIN)/ruff check .
	@$(BIN)/python -m pytest; rc=$$?; \
	if [ $$rc -eq 5 ]; then echo "make test: pytest collected no tests - failing"; exit 1; fi; \
	exit $$rc

bench: $(STAMP)
	$(BIN)/harken bench analyse

clean:
	rm -rf $(VENV) $(DEMO_DIR) .pytest_cache build *.egg-info
