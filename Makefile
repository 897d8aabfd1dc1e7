# Two entry points for a fresh machine: `make demo` and `make test`.
# Each builds its own virtual environment in .venv (once), then does its job.
PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed

.PHONY: demo test bench clean system-libs

# WeasyPrint needs Pango at run time, and subsets the report's fonts with HarfBuzz-subset
# (in C; without it WeasyPrint falls back to fontTools, about 0.7 s slower per report).
# Install them from Debian only when absent.
system-libs:
	@ldconfig -p | grep -q libpango-1.0 && ldconfig -p | grep -q libharfbuzz-subset || { \
	  echo "installing Pango and HarfBuzz-subset for the PDF report"; \
	  apt-get update -q && apt-get install -y -q libpango-1.0-0 libpangoft2-1.0-0 \
	    libharfbuzz-subset0 fonts-dejavu-core; }

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
