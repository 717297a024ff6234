# Two entry points: `make demo` and `make test`. Both create .venv on first use.
PYTHON ?= $(shell command -v python3.11 || command -v python3)
VENV := .venv
PY := $(VENV)/bin/python
STAMP := $(VENV)/.installed

.PHONY: demo test bench clips clean

$(STAMP): pyproject.toml
	@test -x $(PY) || $(PYTHON) -m venv $(VENV)
	$(PY) -m pip install -q --upgrade pip
	$(PY) -m pip install -q -e ".[test]"
	@touch $(STAMP)

demo: $(STAMP)
	$(PY) scripts/demo.py

test: $(STAMP)
	$(PY) -m pytest -q

bench: $(STAMP)
	$(PY) scripts/bench_tracking.py
	$(PY) scripts/bench_physics.py

clips: $(STAMP)
	$(PY) scripts/make_clips.py

clean:
	rm -rf results build *.egg-info
