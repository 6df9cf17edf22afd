# The two set-up commands of the README, and a few conveniences.
#   make demo   create .venv, install fftgauge with every extra, run the battery on @default
#   make test   create .venv if needed, install, run the test suite
PYTHON ?= python3
VENV   ?= .venv
BIN     = $(VENV)/bin
STAMP   = $(VENV)/.installed

.PHONY: demo test install bench clean

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[test]'
	touch $(STAMP)

install: $(STAMP)

demo: $(STAMP)
	$(BIN)/fftgauge backends
	$(BIN)/fftgauge check

test: $(STAMP)
	$(BIN)/python -m pytest -q -n auto

bench: $(STAMP)
	for f in benchmarks/bench_*.py; do $(BIN)/python $$f || exit 1; done

clean:
	rm -rf $(VENV) build *.egg-info .pytest_cache
