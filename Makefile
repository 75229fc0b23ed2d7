# The two commands a new user needs: `make demo` and `make test`.
# Both create the virtual environment in .venv if it is absent and install the project into it.

PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed-stamp

.PHONY: demo test bench venv clean

$(STAMP): pyproject.toml
	@test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e ".[test,dask]"
	@touch $(STAMP)

venv: $(STAMP)

demo: $(STAMP)
	$(BIN)/pqflow run scenario_configs/demo.toml --out runs/demo --overwrite

test: $(STAMP)
	$(BIN)/python -m pytest -q

bench: $(STAMP)
	$(BIN)/python benchmarks/run.py

clean:
	rm -rf $(VENV) runs .pqflow
