# Two commands do everything: `make demo` and `make test`.
PYTHON ?= python3
VENV   := .venv
PY     := $(VENV)/bin/python
DEMO_OUT ?= demo-output

.PHONY: demo test venv test-env fortran bench clean

$(VENV)/bin/python:
	$(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip

# Reinstall only when the package metadata changes (the install is editable).
$(VENV)/.installed: pyproject.toml | $(VENV)/bin/python
	$(PY) -m pip install --quiet -e .
	touch $@

$(VENV)/.installed-test: pyproject.toml | $(VENV)/bin/python
	$(PY) -m pip install --quiet -e '.[test]'
	touch $(VENV)/.installed $@

venv: $(VENV)/.installed

test-env: $(VENV)/.installed-test fortran

# The Fortran export is checked by compiling it; install Debian's gfortran when missing.
fortran:
	@command -v gfortran >/dev/null 2>&1 || { \
	  echo "installing gfortran from Debian's packages"; \
	  SUDO=$$( [ "$$(id -u)" = 0 ] || echo sudo ); \
	  $$SUDO apt-get update -qq && DEBIAN_FRONTEND=noninteractive $$SUDO apt-get install -y -qq gfortran >/dev/null; }

demo: $(VENV)/.installed fortran
	$(VENV)/bin/surrogate3d demo --out $(DEMO_OUT)

test: test-env
	$(PY) -m pytest -q tests

bench: $(VENV)/.installed
	$(PY) benchmarks/run_all.py

clean:
	rm -rf $(VENV) build *.egg-info .pytest_cache
