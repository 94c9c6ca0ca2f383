# noisecal — every target sets itself up from a machine with only Python 3.11+ and make.
PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed

.PHONY: demo test test-slow demo-data bench clean

$(STAMP): pyproject.toml $(wildcard noisecal/_native/*.c noisecal/_native/*.h)
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[test,fleet]'
	touch $(STAMP)

## Run the static characterisation on the committed demo recording; writes reports/.
demo: $(STAMP)
	$(BIN)/noisecal demo

## Fast suite (a few minutes): external checks, bad inputs, small coverage set.
test: $(STAMP)
	$(BIN)/python -m pytest -q

## Long statistical runs: coverage over >= 400 seeded simulations.
test-slow: $(STAMP)
	$(BIN)/python -m pytest -q -m slow -rA

## Regenerate recordings/ from the committed script (fixed seed).
demo-data: $(STAMP)
	$(BIN)/python tools/make_demo_recordings.py
	$(BIN)/python tools/make_drive_recordings.py
	$(BIN)/python tools/make_camera_recordings.py
	$(BIN)/python tools/make_demo_bag.py
	$(BIN)/python tools/make_filter_demo.py

clean:
	rm -rf $(VENV) build *.egg-info .pytest_cache

## Benchmarks (a few minutes; not part of make test): reports/bench.json and a table.
bench: $(STAMP)
	$(BIN)/python tools/bench.py

## Reference tables on real clock data (allantools 2024.6 sdist from PyPI, not committed):
## tests/analysis/test_edf_few_clusters.py reads them and skips when the download failed.
test test-slow: $(VENV)/refdata/allantools-2024.6.tar.gz
$(VENV)/refdata/allantools-2024.6.tar.gz: $(STAMP)
	$(BIN)/python -m pip download --quiet --no-deps --no-binary :all: allantools==2024.6 -d $(VENV)/refdata || echo "allantools sdist not downloaded: the reference-table tests will skip"

## Debian's chromium and chromium-driver for the HTML reports' browser tests: installed with
## apt when missing and apt is at hand (root, or sudo); without them those tests skip
## (under CI=true they fail).
.PHONY: browser
test test-slow: browser
browser:
	@if [ -x /usr/bin/chromium ] && [ -x /usr/bin/chromedriver ]; then :; \
	elif command -v apt-get >/dev/null 2>&1; then \
	  if [ "$$(id -u)" = 0 ]; then SUDO=; else SUDO=sudo; fi; \
	  echo "installing Debian's chromium and chromium-driver for the browser tests"; \
	  $$SUDO apt-get update -qq && DEBIAN_FRONTEND=noninteractive $$SUDO apt-get install -y -qq \
	    chromium chromium-driver >/dev/null || echo "chromium not installed: the browser tests will skip"; \
	else echo "no apt-get: install chromium and chromium-driver for the browser tests"; fi
