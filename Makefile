# Two entry points for a fresh machine: `make demo` and `make test`.
# Each builds its own virtual environment in .venv (once), then does its job.
PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed

.PHONY: demo test bench clean system-libs

# WeasyPrint needs Pango at run time; it subsets the report's fonts with HarfBuzz-subset when
# that library is present (in C; its fontTools fallback is about 0.6 s slower per report and
# gives other PDF bytes). Both come from Debian, installed only when absent; HarfBuzz-subset
# is optional, so a machine that cannot install it still builds and tests.
system-libs:
	@ldconfig -p | grep -q libpango-1.0 || { \
	  echo "installing Pango for the PDF report"; \
	  apt-get update -q && apt-get install -y -q libpango-1.0-0 libpangoft2-1.0-0 fonts-dejavu-core; }
	@ldconfig -p | grep -q libharfbuzz-subset || { \
	  echo "installing HarfBuzz-subset for faster PDF font subsetting"; \
	  { apt-get update -q && apt-get install -y -q libharfbuzz-subset0; } || \
	  echo "HarfBuzz-subset not installed: WeasyPrint will subset fonts with fontTools (slower)"; }

$(STAMP): pyproject.toml | system-libs
	$(PYTHON) -m venv $(VENV)
	$(BIN)/pip install -q --upgrade pip
	$(BIN)/pip install -q -e '.[test]'
	touch $(STAMP)

demo: $(STAMP)
	rm -rf out/rehearsal out/dusk-sleep  # bundles are never overwritten: clear the last demo
	$(BIN)/python plans/make_demo_data.py plans/data/dusk-sleep.csv
	$(BIN)/prespec check --explain plans/dusk-sleep.yaml
	$(BIN)/prespec rehearse plans/dusk-sleep.yaml --out out/rehearsal --seed 1
	$(BIN)/prespec run plans/dusk-sleep.yaml --out out/dusk-sleep
	$(BIN)/prespec verify out/dusk-sleep

test: $(STAMP)
	$(BIN)/python -m pytest

bench: $(STAMP)
	$(BIN)/python bench/run.py

clean:
	rm -rf $(VENV) out build *.egg-info
