# Recharge Atlas: set-up, tests and demo. Every step installs what it needs on a fresh Debian machine.
#   make demo   run the whole job on the invented demo region (core only, no QGIS needed)
#   make test   the suite twice: newest libraries from PyPI (.venv), then QGIS's Python with Debian's libraries
PYTHON      ?= python3
VENV        := .venv
QGIS_PYTHON ?= /usr/bin/python3
QGIS_PATH   := $(CURDIR)/.qgis-path
PYTEST_ARGS ?=

.PHONY: all venv demo test test-core test-qgis system qgis-path lint format plugin-zip clean

all: test

venv: $(VENV)/.installed

$(VENV)/.installed: pyproject.toml setup.py metadata.txt
	@echo "== Python environment with the newest libraries from PyPI ($(VENV))"
	$(PYTHON) -m venv $(VENV)
	$(VENV)/bin/python -m pip install --quiet --upgrade pip
	$(VENV)/bin/python -m pip install --quiet --upgrade --upgrade-strategy eager -e ".[test]"
	@touch $@

demo: venv
	$(VENV)/bin/recharge-atlas demo --out demo_output

test: system test-core test-qgis

test-core: venv
	@echo "== Tests on the newest libraries from PyPI"
	$(VENV)/bin/python -c "import numpy, pandas, shapely, geopandas; print('numpy', numpy.__version__, '| pandas', pandas.__version__, '| shapely', shapely.__version__, '| geopandas', geopandas.__version__)"
	$(VENV)/bin/python -m pytest -q $(PYTEST_ARGS)

# QGIS, Debian's Python libraries and Chromium: installed with apt when missing and run as root.
system:
	@tools/ensure-system

# QGIS loads plugins from folders named after the plugin; a link gives the clone that name.
qgis-path:
	@mkdir -p $(QGIS_PATH)
	@ln -sfn $(CURDIR) $(QGIS_PATH)/recharge_atlas

test-qgis: system qgis-path
	@if [ -f .qgis-missing ]; then rm -f .qgis-missing; echo "== QGIS tests skipped: QGIS is not installed (see above)"; exit 0; fi; \
	echo "== Tests inside QGIS's Python with Debian's libraries"; \
	$(QGIS_PYTHON) -c "import numpy, pandas, shapely, geopandas; from qgis.core import Qgis; print('QGIS', Qgis.QGIS_VERSION, '| numpy', numpy.__version__, '| pandas', pandas.__version__, '| shapely', shapely.__version__, '| geopandas', geopandas.__version__)" && \
	QT_QPA_PLATFORM=offscreen PYTHONPATH=$(QGIS_PATH) RECHARGE_ATLAS_IN_QGIS=1 \
	  $(QGIS_PYTHON) -m pytest -q -p no:cacheprovider $(PYTEST_ARGS)

# The plugin as QGIS installs it: dist/recharge_atlas-<version>.zip (version from metadata.txt).
plugin-zip:
	$(PYTHON) tools/build-plugin-zip --out dist

lint: venv
	$(VENV)/bin/ruff check .

format: venv
	$(VENV)/bin/ruff format .

clean:
	rm -rf $(VENV) .qgis-path .pytest_cache .hypothesis build dist *.egg-info demo_output .qgis-missing
	find . -name __pycache__ -type d -prune -exec rm -rf {} +
