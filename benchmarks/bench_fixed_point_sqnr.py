"""Figures: the built-in fixed-point radix-2's SQNR against N, beside the textbook slope.

Oppenheim & Schafer, Discrete-Time Signal Processing, 3rd ed., section 9.7 (from memory):
with 1/2 per stage the output noise-to-signal ratio grows like N (about 3.01 dB lost per
doubling of N); with all the scaling at the input, like N^2 (6.02 dB). This prints, for Q15
and Q31, each scaling rule and each rounding rule, the least-squares slope of the SQNR
against log2 N (N = 16..16384, white input with real and imaginary parts uniform on
(-1/sqrt 2, 1/sqrt 2), four seeds per size) and the SQNR at N = 1024. The table of
docs/fixed-point.md comes from it; tests/test_fixed_point.py holds the slopes to 0.25 dB.

Run: ``.venv/bin/python benchmarks/bench_fixed_point_sqnr.py``
"""

from __future__ import annotations

import math

import numpy as np

from fftgauge.harness.fixed.formats import FORMATS, quantise
from fftgauge.harness.fixed.measure import exact_output
from fftgauge.harness.fixed.metrics import sqnr_db
from fftgauge.harness.fixed.radix2 import FixedRadix2

LOG2_SIZES = range(4, 15)
SEEDS = range(4)


def mean_sqnr(fft: FixedRadix2, n: int) -> float:
    """Return the mean SQNR (dB) of ``fft`` over :data:`SEEDS` white inputs of length n."""
    values = []
    a = 1 / math.sqrt(2)
    for seed in SEEDS:
        rng = np.random.default_rng(seed)
        x = quantise(rng.uniform(-a, a, n) + 1j * rng.uniform(-a, a, n), fft.fmt)
        r = fft.transform(x)
        values.append(sqnr_db(exact_output(x, r.exponent), r.pairs[:, 0] + 1j * r.pairs[:, 1].astype(float)))
    return float(np.mean(values))


def main() -> None:
    """Print one line per format, scaling and rounding rule."""
    print("format scaling rounding        slope dB/doubling  SQNR at N=1024 dB  (textbook slope: "
          "stage -3.01, input -6.02)")
    for name, fmt in FORMATS.items():
        for scaling in ("stage", "input", "bfp"):
            for rounding in ("round-half-up", "convergent", "truncate"):
                fft = FixedRadix2(fmt, scaling, rounding)
                sqnr = [mean_sqnr(fft, 1 << t) for t in LOG2_SIZES]
                slope = np.polyfit(list(LOG2_SIZES), sqnr, 1)[0]
                print(f"{name:6} {scaling:7} {rounding:15} {slope:17.2f}  {sqnr[10 - LOG2_SIZES.start]:17.1f}")


if __name__ == "__main__":
    main()
