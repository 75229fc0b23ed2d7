# The two commands a new user needs: `make demo` and `make test`.
# Both create the virtual environment in .venv if it is absent and install the project into it.

PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed-stamp

.PHONY: demo test lint bench venv clean

$(STAMP): pyproject.toml
	@test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	@echo "installing pqflow and its dependencies into $(VENV) (log: $(VENV)/install.log)"
	@$(BIN)/python -m pip install --upgrade pip > $(VENV)/install.log 2>&1 || (cat $(VENV)/install.log; exit 1)
	@$(BIN)/python -m pip install -e ".[test,dask,lint]" >> $(VENV)/install.log 2>&1 || (cat $(VENV)/install.log; exit 1)
	@touch $(STAMP)

venv: $(STAMP)

demo: $(STAMP)
	$(BIN)/pqflow run scenario_configs/demo.toml --out runs/demo --overwrite

test: $(STAMP)
	$(BIN)/python -m pytest -q

lint: $(STAMP)
	$(BIN)/ruff check src pipeline tests benchmarks
	$(BIN)/mypy

bench: $(STAMP)
	$(BIN)/python benchmarks/run.py

clean:
	rm -rf $(VENV) runs .pqflow
