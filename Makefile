# The two set-up commands of the README, and a few conveniences.
#   make demo   create .venv, install fftgauge with every extra, run the battery on @default
#   make test   create .venv if needed, install, run the test suite
PYTHON ?= python3
VENV   ?= .venv
BIN     = $(VENV)/bin
STAMP   = $(VENV)/.installed

.PHONY: demo test install bench clean browser

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[test]'
	touch $(STAMP)

install: $(STAMP)

demo: $(STAMP)
	$(BIN)/fftgauge backends
	$(BIN)/fftgauge check

# The report page's browser tests need Chromium, a Debian package (pip cannot install it):
# installed here when running as root with apt-get, else the tests skip and say how to get it.
browser:
	@command -v chromium >/dev/null 2>&1 || { [ "$$(id -u)" = 0 ] && command -v apt-get >/dev/null 2>&1 && \
	  apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq chromium >/dev/null; } || \
	  echo "note: chromium is not installed (apt-get install chromium): the report page's browser tests will skip"

test: $(STAMP) browser
	$(BIN)/python -m pytest -q -n auto

bench: $(STAMP)
	for f in benchmarks/bench_*.py; do $(BIN)/python $$f || exit 1; done

clean:
	rm -rf $(VENV) build *.egg-info .pytest_cache
