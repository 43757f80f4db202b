# Two commands: `make lab` and `make test`.  Both create .venv when missing and
# install the project into it; nothing else is needed but Python >= 3.11 and make.

PYTHON ?= python3
VENV ?= .venv
BIN := $(VENV)/bin
NOTEBOOK ?= notebooks/01_quickstart.ipynb

.PHONY: lab test install-lab install-test bench notebooks clean

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip

# A stamp per extra, remade when pyproject.toml changes.
$(VENV)/.lab-installed: pyproject.toml | $(BIN)/python
	$(BIN)/python -m pip install --quiet -e '.[lab]'
	touch $@

# The test install includes the lab extra, so it satisfies `make lab` too.
$(VENV)/.test-installed: pyproject.toml | $(BIN)/python
	$(BIN)/python -m pip install --quiet -e '.[lab,test]'
	touch $@ $(VENV)/.lab-installed

install-lab: $(VENV)/.lab-installed
install-test: $(VENV)/.test-installed

# JupyterLab refuses to run as root unless told; containers and CI machines often are root.
ALLOW_ROOT := $(if $(filter 0,$(shell id -u)),--allow-root,)

lab: install-lab
	$(BIN)/jupyter lab $(ALLOW_ROOT) $(NOTEBOOK)

# Unit tests, doctests in the package and the notebooks under nbval, in one run.
test: install-test
	$(BIN)/python -m pytest --nbval -p no:randomly

bench: install-test
	$(BIN)/python benchmarks/engine.py
	$(BIN)/python benchmarks/small.py
	$(BIN)/python benchmarks/derive.py
	$(BIN)/python benchmarks/bench.py
	$(BIN)/python benchmarks/bench_lot.py
	$(BIN)/python benchmarks/configurations.py
	$(BIN)/python benchmarks/study.py
	$(BIN)/python benchmarks/plan.py
	$(BIN)/python benchmarks/cluster.py

# Re-execute every notebook in place, stored without widget state (see tools/run_notebooks.py).
notebooks: install-test
	$(BIN)/python tools/run_notebooks.py

clean:
	rm -rf build .pytest_cache
