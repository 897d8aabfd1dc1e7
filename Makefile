# Two entry points for a fresh machine: `make demo` and `make test`.
# Each builds its own virtual environment in .venv (once), then does its job.
PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed

.PHONY: demo test bench clean system-libs

# WeasyPrint needs Pango at run time; it subsets the report's fonts with HarfBuzz-subset when
# that library is present (in C; its fontTools fallback is about 0.6 s slower per report and
# gives other PDF bytes). Both come from Debian, installed with apt-get (as root) only when
# ldconfig does not find them; HarfBuzz-subset is optional, so a machine that cannot install
# it still builds and tests. Without root: have Pango installed by someone who has it, or put
# it where the loader finds it, and skip this step with `make demo SKIP_SYSTEM_LIBS=1`.
PANGO_PACKAGES := libpango-1.0-0 libpangoft2-1.0-0 fonts-dejavu-core
SKIP_SYSTEM_LIBS ?=

system-libs:
ifeq ($(SKIP_SYSTEM_LIBS),)
	@ldconfig -p | grep -q libpango-1.0 || { \
	  if [ "$$(id -u)" != 0 ]; then \
	    echo "prespec needs Pango for the PDF report, and installing it with apt-get needs root."; \
	    echo "  as root:     apt-get install -y $(PANGO_PACKAGES)"; \
	    echo "  or, once Pango is installed another way: make $(or $(MAKECMDGOALS),demo) SKIP_SYSTEM_LIBS=1"; \
	    exit 1; fi; \
	  echo "==> installing Pango for the PDF report (apt-get)"; \
	  apt-get update -q && apt-get install -y -q $(PANGO_PACKAGES); }
	@ldconfig -p | grep -q libharfbuzz-subset || { \
	  echo "==> installing HarfBuzz-subset for faster PDF font subsetting (apt-get, optional)"; \
	  { [ "$$(id -u)" = 0 ] && apt-get update -q && apt-get install -y -q libharfbuzz-subset0; } || \
	  echo "HarfBuzz-subset not installed: WeasyPrint will subset fonts with fontTools (slower)"; }
else
	@echo "==> SKIP_SYSTEM_LIBS set: not checking for Pango (the PDF report needs it)"
endif

# About a minute on a fresh machine: each step says what it does, and pip lists the packages
# as it collects and installs them.
$(STAMP): pyproject.toml | system-libs
	@echo "==> creating the virtual environment $(VENV)"
	$(PYTHON) -m venv $(VENV)
	@echo "==> upgrading pip"
	$(BIN)/pip install -q --upgrade pip
	@echo "==> installing prespec and its libraries into $(VENV) (about a minute)"
	$(BIN)/pip install -e '.[test]'
	touch $(STAMP)
	@echo "==> installed: run .venv/bin/prespec, or . .venv/bin/activate and then prespec"

demo: $(STAMP)
	rm -rf out/rehearsal out/dusk-sleep  # bundles are never overwritten: clear the last demo
	$(BIN)/python plans/make_demo_data.py plans/data/dusk-sleep.csv
	$(BIN)/prespec check --explain plans/dusk-sleep.yaml
	$(BIN)/prespec rehearse plans/dusk-sleep.yaml --out out/rehearsal --seed 1
	$(BIN)/prespec run plans/dusk-sleep.yaml --out out/dusk-sleep
	$(BIN)/prespec verify out/dusk-sleep
	@echo "==> demo done: out/dusk-sleep/report.pdf. prespec is in $(VENV), not on PATH:"
	@echo "    run $(BIN)/prespec, or . $(BIN)/activate and then prespec"

test: $(STAMP)
	$(BIN)/python -m pytest

bench: $(STAMP)
	$(BIN)/python bench/run.py

clean:
	rm -rf $(VENV) out build *.egg-info
