# Set-up and everyday commands. Every target builds the local virtual environment first.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: demo test bench samples clean

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/pip install --quiet --upgrade pip
	$(BIN)/pip install --quiet -e '.[dev]'
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/python -m railtrace.demo

test: $(STAMP)
	$(BIN)/python -m pytest -q

bench: $(STAMP)
	$(BIN)/python benchmarks/render_speed.py

clean:
	rm -rf $(VENV) demo_output .pytest_cache

# Re-film every sample scene (slow: minutes). The clips are committed.
samples: $(STAMP)
	for s in sample_clips/*.toml; do $(BIN)/railtrace render $$s --out $${s%.toml}.mp4 --force || exit 1; done
