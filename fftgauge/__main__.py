"""``python -m fftgauge``: the same command line as the ``fftgauge`` console script."""

from fftgauge.harness.cli import main

if __name__ == "__main__":
    raise SystemExit(main())
