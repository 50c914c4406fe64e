# limbclock: every target creates and uses the local virtual environment .venv
PY ?= python3
VENV := .venv
VPY := $(VENV)/bin/python
STAMP := $(VENV)/.installed
MP_DIR := tests/mp/node_modules/@micropython/micropython-webassembly-pyscript

.PHONY: demo test bench mutants lint venv mp clean vectors almanac-fit

$(STAMP): pyproject.toml
	$(PY) -m venv $(VENV)
	$(VPY) -m pip install -q --upgrade pip
	$(VPY) -m pip install -q -e '.[host,fit,test,board]'
	touch $(STAMP)

venv: $(STAMP)

$(MP_DIR): tests/mp/package.json
	cd tests/mp && npm install --no-audit --no-fund --silent

mp: $(MP_DIR)

demo: $(STAMP)
	$(VPY) -m host demo --out demo-out

lint: $(STAMP)
	$(VPY) -m ruff check engine device host tests vectors bench

test: $(STAMP) $(MP_DIR) lint
	$(VPY) -m pytest

bench: $(STAMP) $(MP_DIR)
	$(VPY) -m bench

# small deliberate bugs in a copy of the tree, each must make a test fail (tests/mutants.py);
# MUTANTS_ARGS="--jobs 2" or a mutant's name to run some
mutants: $(STAMP) $(MP_DIR)
	$(VPY) tests/mutants.py $(MUTANTS_ARGS)

vectors: $(STAMP)
	$(VPY) -m vectors.generate

almanac-fit: $(STAMP)
	$(VPY) -m host almanac-fit --first-year 2025 --last-year 2050

clean:
	rm -rf $(VENV) tests/mp/node_modules demo-out
