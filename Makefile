# Fieldcast developer tasks. Every target is idempotent and quick when everything is in place.
#   make deps     system packages (QGIS, GDAL, pyproj, SciPy, Meuse data, Chromium) via apt when missing
#   make venv     .venv with the test-only tools, sharing the system numpy/scipy/GDAL/QGIS
#   make lint     ruff
#   make test     deps, venv, lint, then the test suite (FIELDCAST_REQUIRE_ALL=1: a missing tool fails, not skips)
#   make bench    speed benchmark (tools/bench.py)
#   make profile  where the time goes in the hot paths (pyinstrument)
#   make demo     end-to-end demo (tools/run_demo.sh)
#   make package  dist/fieldcast.zip, installable with QGIS's "Install from ZIP"
#   make clean    remove build outputs and caches (keeps .venv)

SHELL := /bin/bash
SYSTEM_PYTHON := /usr/bin/python3
VENV := .venv
PY := $(VENV)/bin/python
APT_PACKAGES := qgis python3-qgis qgis-providers python3-gdal python3-pyproj python3-scipy python3-venv \
	python3-pip python3-pil r-cran-sp chromium libopenblas0-pthread python3-dask python3-distributed
TEST_PACKAGES := pytest ruff scikit-learn rdata pyinstrument
PYTHON_MODULES := qgis.core, osgeo.gdal, pyproj, scipy, numpy
PACKAGE_CONTENT := __init__.py metadata.txt LICENSE README.md plugin algorithms icons

.PHONY: deps venv lint test bench profile demo package clean

deps:
	@missing=""; \
	if command -v dpkg-query >/dev/null 2>&1; then \
		for pkg in $(APT_PACKAGES); do \
			[ "$$(dpkg-query -W -f='$${db:Status-Status}' $$pkg 2>/dev/null)" = installed ] || missing="$$missing $$pkg"; \
		done; \
	fi; \
	if [ -z "$$missing" ] && command -v qgis_process.bin >/dev/null 2>&1 \
		&& $(SYSTEM_PYTHON) -c "import $(PYTHON_MODULES)" >/dev/null 2>&1; then exit 0; fi; \
	if ! command -v apt-get >/dev/null 2>&1; then \
		echo "Fieldcast needs QGIS >= 3.22 with qgis_process.bin, and for $(SYSTEM_PYTHON): the qgis, GDAL"; \
		echo "(osgeo), pyproj, SciPy and numpy modules, plus python venv and pip. Install them with your system's"; \
		echo "package manager (Debian/Ubuntu names: $(APT_PACKAGES)), then run make again."; \
		exit 1; \
	fi; \
	sudo=""; [ "$$(id -u)" = 0 ] || sudo=sudo; \
	echo "Installing system packages:$${missing:- $(APT_PACKAGES)}"; \
	$$sudo apt-get update && \
	$$sudo env DEBIAN_FRONTEND=noninteractive apt-get install -y --no-install-recommends $(APT_PACKAGES)

venv: $(VENV)/.fieldcast-venv-ready

# The constraints pin the system numpy and scipy so pip never installs a second copy that would shadow them.
$(VENV)/.fieldcast-venv-ready: Makefile
	$(SYSTEM_PYTHON) -m venv --system-site-packages $(VENV)
	$(SYSTEM_PYTHON) -c "import numpy, scipy; print(f'numpy=={numpy.__version__}\nscipy=={scipy.__version__}')" \
		> $(VENV)/constraints.txt
	$(PY) -m pip install --quiet --disable-pip-version-check -c $(VENV)/constraints.txt $(TEST_PACKAGES)
	touch $@

lint: venv
	$(VENV)/bin/ruff check .

test: deps venv lint
	FIELDCAST_REQUIRE_ALL=1 QT_QPA_PLATFORM=offscreen $(PY) -m pytest -q tests

bench: deps venv
	$(PY) tools/bench.py

profile: deps venv
	$(PY) tools/profile_hot_paths.py

demo: deps
	bash tools/run_demo.sh

package:
	rm -rf build/package dist/fieldcast.zip dist/fieldcast.zip.part
	mkdir -p build/package/fieldcast dist
	cp -r $(PACKAGE_CONTENT) build/package/fieldcast/
	find build/package -name __pycache__ -prune -exec rm -rf {} +
	find build/package -name '*.py[co]' -delete
	cd build/package && $(SYSTEM_PYTHON) -m zipfile -c ../../dist/fieldcast.zip.part fieldcast
	mv dist/fieldcast.zip.part dist/fieldcast.zip
	@echo "dist/fieldcast.zip"

clean:
	rm -rf build dist .pytest_cache .ruff_cache demo-output bench-output test-artifacts
	find . -path ./$(VENV) -prune -o -name __pycache__ -type d -prune -exec rm -rf {} +
