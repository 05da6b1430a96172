# Two set-up commands: `make bench` and `make test` (see README.md).
PYTHON ?= python3
VENV   ?= .venv
PY     := $(VENV)/bin/python
PIP    := $(VENV)/bin/pip

.PHONY: bench test install install-test clean

$(VENV)/.installed: pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(PIP) install -q -e .
	touch $@

$(VENV)/.installed-test: $(VENV)/.installed
	$(PIP) install -q -e '.[test]'
	touch $@

install: $(VENV)/.installed
install-test: $(VENV)/.installed-test

bench: install
	$(VENV)/bin/lapbench run suite=default
	$(VENV)/bin/lapbench report report.suite=default report.name=default > /dev/null
	@cat results/reports/default/summary.md

test: install-test
	$(PY) -m pytest -q

clean:
	rm -rf $(VENV) results/runs results/reports
