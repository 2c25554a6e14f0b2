# Channel Habitat — every set-up step is here, idempotent: a second run with nothing to do
# takes seconds. See README.md for the two commands a newcomer needs (make demo, make test).

SHELL        := /bin/bash
PY_SYS       := /usr/bin/python3
VENV         := .venv
PY           := $(VENV)/bin/python
BUILD        := build
PLUGIN_NAME  := channel_habitat
STAGE        := $(BUILD)/plugins/$(PLUGIN_NAME)
SAMPLE_DIR   := sample_gis/generated
SAMPLE_STAMP := $(SAMPLE_DIR)/.complete
QGIS_BIN     := /usr/bin/qgis_process.bin

# Headless Qt/QGIS for every target that touches QGIS.
export QT_QPA_PLATFORM := offscreen
export QGIS_PLUGINPATH := $(CURDIR)/$(BUILD)/plugins
export PYTHONDONTWRITEBYTECODE := 1

.PHONY: all setup sysdeps venv stage sample demo test lint pytest package provider-list \
        bench clean distclean

all: test

## ---- set-up ---------------------------------------------------------------------------
setup: sysdeps venv stage

sysdeps:
	@tools/install_sysdeps.sh

venv: $(VENV)/.stamp

$(VENV)/.stamp: requirements.txt constraints.txt tools/check_env.py
	@test -x $(PY) || $(PY_SYS) -m venv --system-site-packages $(VENV)
	$(PY) -m pip install --quiet --disable-pip-version-check -r requirements.txt -c constraints.txt
	@$(PY) tools/check_env.py
	@touch $@

# The plugin folder QGIS sees (QGIS_PLUGINPATH): symlinks to the source, so edits show at once.
stage: $(STAGE)/.stamp

$(STAGE)/.stamp: tools/stage_plugin.sh metadata.txt $(wildcard plugin/*)
	@tools/stage_plugin.sh $(STAGE)
	@touch $@

## ---- the demo reach and the demo ------------------------------------------------------
sample: setup $(SAMPLE_STAMP)

# The generator uses only these plugin modules; other core edits do not regenerate the sample.
SAMPLE_DEPS  := $(wildcard sample_gis/*.py) plugin/core/reach.py plugin/core/locate.py plugin/core/units.py \
                plugin/core/errors.py plugin/gis/geotiff.py

$(SAMPLE_STAMP): $(SAMPLE_DEPS)
	$(PY) -m sample_gis.generate --out $(SAMPLE_DIR)

demo: sample
	$(PY) demo/run_demo.py --sample $(SAMPLE_DIR) --out demo_output

## ---- tests ----------------------------------------------------------------------------
test: sample lint pytest

lint: setup
	$(VENV)/bin/ruff check .

pytest: setup
	$(PY) -m pytest

## ---- packaging and QGIS ---------------------------------------------------------------
package: setup
	$(PY) tools/package_plugin.py --out dist/$(PLUGIN_NAME).zip

# Shows that qgis_process finds the provider (Debian's qgis_process wrapper passes a flag the
# 3.22 binary rejects, so the binary is called directly).
# qgis_process runs the system Python: the venv's site-packages give it shapely 2.0.
provider-list: setup
	@export PYTHONPATH="$$($(PY) -c 'import sysconfig; print(sysconfig.get_paths()["purelib"])')"; \
	  $(QGIS_BIN) plugins enable $(PLUGIN_NAME) >/dev/null 2>&1 || true; \
	  $(QGIS_BIN) list 2>/dev/null | sed -n '/^Channel Habitat/,/^$$/p'

bench: sample
	$(PY) bench/run_all.py

clean:
	rm -rf $(BUILD) dist demo_output .pytest_cache .ruff_cache
	find . -name __pycache__ -prune -exec rm -rf {} +

distclean: clean
	rm -rf $(VENV) $(SAMPLE_DIR)
