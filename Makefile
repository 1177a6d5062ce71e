# Two commands do everything on a fresh machine: `make demo` and `make test`.
PY ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: demo test venv bench clean

$(STAMP): pyproject.toml
	test -x $(BIN)/python || $(PY) -m venv $(VENV)
	$(BIN)/pip install -q --upgrade pip
	# torch first and pinned: this spec takes the local CPU build, anything else a multi-GB CUDA one
	$(BIN)/pip install -q torch==2.13.0
	$(BIN)/pip install -q -e '.[test]'
	touch $(STAMP)

venv: $(STAMP)

demo: $(STAMP)
	$(BIN)/snnconvert run recipes/default.toml --out runs/default

test: $(STAMP)
	$(BIN)/python -m pytest -q tests

bench: $(STAMP)
	$(BIN)/python bench/run_all.py

clean:
	rm -rf runs .pytest_cache
