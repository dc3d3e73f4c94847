# Set-up and everyday commands. Every target builds the local virtual environment first.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: demo test bench samples clean browser

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/pip install --quiet --upgrade pip
	$(BIN)/pip install --quiet -e '.[dev]'
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/python -m railtrace.demo

# The suite as two pytest processes at once (tests/halves.py holds the split; DEVELOPERS.md, "Tests").
# `$(BIN)/python -m pytest -q` runs it all in one process.
test: $(STAMP) browser
	$(BIN)/python tests/halves.py

# Headless Chromium for the report's browser test (tests/test_browser.py), from Debian's packages.
# Installed only when missing, and only where we are root with apt-get (CI); elsewhere the
# browser test skips and says why.
browser:
	@if [ ! -x /usr/bin/chromium ]; then \
	  if [ "$$(id -u)" = 0 ] && command -v apt-get >/dev/null 2>&1; then \
	    apt-get update && DEBIAN_FRONTEND=noninteractive apt-get install -y --no-install-recommends chromium; \
	  else \
	    echo "note: /usr/bin/chromium is missing and this is not a root shell with apt-get: the browser test will be skipped"; \
	  fi; \
	fi

bench: $(STAMP)
	$(BIN)/python benchmarks/render_speed.py

clean:
	rm -rf $(VENV) demo_output .pytest_cache

# Re-film every sample scene (slow: minutes). The clips are committed.
samples: $(STAMP)
	for s in sample_clips/*.toml; do $(BIN)/railtrace render $$s --out $${s%.toml}.mp4 --force || exit 1; done
