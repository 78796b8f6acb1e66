# biasbridge: one target per thing a person runs.
# The interpreter the venv is made with: the system's /usr/bin/python3 where it is Python >= 3.10
# with its venv module (Debian's links the interpreter into its executable; a pyenv build of
# 3.11.7 made --enable-shared without --enable-optimizations ran `check` of 200 stages 12 % slower
# in CPU and 16 % in wall time: DEVELOPERS.md, speed notes), else the first python3 on PATH.
# `make PYTHON=python3.12 install` chooses another (after `make clean`, for an existing venv).
SYSTEM_PYTHON := /usr/bin/python3
PYTHON ?= $(shell $(SYSTEM_PYTHON) -c 'import sys, ensurepip, venv; sys.exit(sys.version_info < (3, 10))' >/dev/null 2>&1 && echo $(SYSTEM_PYTHON) || echo python3)
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed

.PHONY: install demo test bench lint clean ngspice

install: $(STAMP) ngspice

# The venv and the editable install, redone only when pyproject.toml changes.
$(STAMP): pyproject.toml
	@test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e ".[test]"
	@touch $(STAMP)

# ngspice and its shared library from Debian's packages, when missing and we can.
ngspice:
	@if command -v ngspice >/dev/null 2>&1 && { ldconfig -p 2>/dev/null | grep -q libngspice.so; }; then \
		true; \
	elif [ "$$(id -u)" = 0 ] && command -v apt-get >/dev/null 2>&1; then \
		echo "installing ngspice and libngspice0 with apt-get"; \
		{ apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq ngspice libngspice0; } >/dev/null \
		|| echo "biasbridge: apt-get could not install ngspice; the simulator column will be empty"; \
	else \
		echo "biasbridge: ngspice not found; install it with 'sudo apt-get install ngspice libngspice0' (the simulator column stays empty until then)"; \
	fi

demo: install
	$(BIN)/biasbridge demo

test: install
	$(BIN)/python -m pytest

bench: install
	$(BIN)/python tests/bench/run.py; a=$$?; $(BIN)/python tests/bench/sweep_bench.py; b=$$?; \
	$(BIN)/python tests/bench/large_bench.py; c=$$?; $(BIN)/python tests/bench/spread_bench.py; d=$$?; \
	$(BIN)/python tests/bench/gain_bench.py; e=$$?; exit $$((a || b || c || d || e))

lint: install
	$(BIN)/ruff check bridge tests

clean:
	rm -rf $(VENV) build *.egg-info .pytest_cache .ruff_cache
