VENV ?= .venv
PY := $(VENV)/bin/python
STAMP := $(VENV)/.installed

.PHONY: demo test lint bench clean

$(STAMP): pyproject.toml
	python3 -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip
	$(PY) -m pip install --quiet -e '.[test]'
	touch $(STAMP)

demo: $(STAMP)
	$(VENV)/bin/landlift demo

test: $(STAMP)
	@bash scripts/ensure-chromium.sh
	$(VENV)/bin/ruff check app tests benchmarks sample_data
	$(VENV)/bin/mypy
	$(VENV)/bin/lint-imports
	$(PY) -m pytest -q

lint: $(STAMP)
	$(VENV)/bin/ruff check app tests benchmarks sample_data
	$(VENV)/bin/mypy
	$(VENV)/bin/lint-imports

bench: $(STAMP)
	$(PY) benchmarks/bootstrap_floor.py

clean:
	rm -rf $(VENV) landlift-data
