# Two-command set-up: `make demo` and `make test` each create .venv when it is missing and
# (re)install the project only when pyproject.toml has changed since the last install.
PYTHON ?= python3.11
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed

.PHONY: demo test bench install clean

install: $(STAMP)

$(STAMP): pyproject.toml
	@test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[test]'
	@touch $(STAMP)

demo: $(STAMP)
	$(BIN)/slipwatch demo

# The board's browser test and the PDF text test need Debian's chromium and poppler-utils.
SYSTEM_TOOLS_OK = command -v chromium >/dev/null 2>&1 && command -v pdftotext >/dev/null 2>&1

test: $(STAMP)
	@$(SYSTEM_TOOLS_OK) || (apt-get update -qq && DEBIAN_FRONTEND=noninteractive \
		apt-get install -y -qq chromium poppler-utils >/dev/null) || \
		echo "warning: could not install chromium and poppler-utils (needs root and apt);" \
		"the browser and PDF-text tests will be skipped and say so"
	$(BIN)/python -m pytest -q

bench: $(STAMP)
	@set -e; for script in tests/benchmarks/bench_*.py; do \
		echo "== $$script"; $(BIN)/python $$script; done

clean:
	rm -rf $(VENV) build *.egg-info demo_workspace
