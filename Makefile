# Every target sets up its own virtual environment; nothing is installed by hand.
PYTHON ?= python3
VENV   := .venv
PY     := $(VENV)/bin/python
STAMP  := $(VENV)/.installed-test

.PHONY: test test-slow demo demo-batch bench clean

$(PY):
	$(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip

$(STAMP): $(PY) pyproject.toml
	$(PY) -m pip install --quiet -e '.[test]'
	touch $(STAMP)

test: $(STAMP)
	$(PY) -m pytest -q

test-slow: $(STAMP)
	$(PY) -m pytest -q -m "slow or matrix"

demo: $(STAMP)
	$(VENV)/bin/famwise demo --out out/demo --force

demo-batch: $(STAMP)
	$(VENV)/bin/famwise batch demos/water_quality.csv --all-numeric --group station \
	    --seed 20260417 --jobs 2 --out out/demo-batch --force

bench: $(STAMP)
	$(PY) tests/bench/run_all.py

clean:
	rm -rf $(VENV) out build dist *.egg-info
