# Everything installs from scratch into .venv: `make demo` and `make test` work on a fresh machine
# that has only Python 3 (with venv) and the system's Mesa (libEGL) for offscreen rendering.
PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin
CASE   := meshes/wake

.PHONY: demo test install install-test bench clean

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip

$(VENV)/.installed: $(BIN)/python pyproject.toml
	$(BIN)/python -m pip install --quiet -e .
	touch $@

$(VENV)/.installed-test: $(VENV)/.installed
	$(BIN)/python -m pip install --quiet -e '.[test]'
	touch $@

install: $(VENV)/.installed
install-test: $(VENV)/.installed-test

$(CASE)/.complete: | $(VENV)/.installed
	$(BIN)/python -m vtkflow.demo $(CASE)

demo: $(VENV)/.installed $(CASE)/.complete
	$(BIN)/vtkflow run recipes/demo.yaml
	@echo "Outputs: out/demo (VTP frames per entry, manifest.json, PNG renders under out/demo/<render>/)"

test: $(VENV)/.installed-test
	$(BIN)/python -m pytest

bench: $(VENV)/.installed-test
	$(BIN)/python benchmarks/run_all.py

clean:
	rm -rf out $(CASE)
