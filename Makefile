# Two entry points, both self-installing: `make demo` and `make test`.
PYTHON ?= python3
VENV   ?= .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed

.PHONY: demo test bench clean

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/pip install --quiet --upgrade pip
	$(BIN)/pip install --quiet -e '.[test,dask]'
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/screenweave run configs/demo.toml --out out/demo

test: $(STAMP)
	$(BIN)/python -m pytest -n 2 -q

bench: $(STAMP)
	$(BIN)/python benchmarks/run_all.py

clean:
	rm -rf out .pytest_cache
