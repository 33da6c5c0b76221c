# swingmeter: the two commands of the README are `make demo` and `make test`.
PYTHON ?= python3
VENV   := .venv
PY     := $(VENV)/bin/python
STAMP  := $(VENV)/.installed

.PHONY: demo test lint format bench fuzz sysdeps clean

# Many small BLAS calls per gate: one BLAS thread is fastest (see monitor/__init__.py).
export OPENBLAS_NUM_THREADS ?= 1
export OMP_NUM_THREADS ?= 1

$(STAMP): pyproject.toml
	test -x $(PY) || $(PYTHON) -m venv $(VENV)
	$(PY) -m pip install -q --upgrade pip
	$(PY) -m pip install -q -e '.[test]'
	touch $(STAMP)

sysdeps:
	bash .ci/sysdeps

demo: $(STAMP)
	$(PY) -m monitor.cli demo

test: sysdeps $(STAMP) lint
	$(PY) -m pytest -q -n 2 || { rc=$$?; [ $$rc -eq 5 ] && echo "no tests ran" >&2; exit $$rc; }

lint: $(STAMP)
	$(PY) -m ruff check .
	$(PY) -m ruff format --check .

format: $(STAMP)
	$(PY) -m ruff format .
	$(PY) -m ruff check --fix .

bench: sysdeps $(STAMP)
	$(PY) bench/run.py

fuzz: $(STAMP)
	SWINGMETER_FUZZ=full $(PY) -m pytest -q -n 2 tests -m fuzz

clean:
	rm -rf $(VENV) build *.egg-info .pytest_cache .ruff_cache
