"""The built-in fixed-point radix-2 FFT as a backend (``radix2-fixed``).

The arithmetic is :class:`fftgauge.harness.fixed.radix2.FixedRadix2` (decimation in time in
numpy integer arithmetic, documented there and in docs/fixed-point.md): Q15 and Q31
transforms of powers of two, every kind: ``fft`` and ``ifft`` on ``(n, 2)`` integer pairs,
``rfft`` from ``n`` real integers to ``(n/2 + 1, 2)`` pairs, ``irfft`` back. Options choose the
scaling rule (``none``, ``input``, ``stage``, ``bfp``), the rounding rule (``truncate``,
``round-half-up``, ``convergent``), the overflow rule (``saturate``, ``wrap``) and the twiddle
width in bits (0: the format's own). It declares the output shift its scaling implies
(``none`` 0, ``input``/``stage`` log2 N, ``bfp`` per call), the same for every kind (the
inverse kinds' shift is to the unnormalised inverse: with 1/2 per stage their output is
numpy's ifft/irfft of the integers); ``declare_shift`` overrides what
it declares (a deliberately wrong declaration, for trying the battery's ``scaling-shift``).
"""

from __future__ import annotations

from fftgauge.backends.base import Backend, Capabilities, FunctionPlan, OptionSpec, SizeRule
from fftgauge.harness.fixed.declared import FixedScaling
from fftgauge.harness.fixed.formats import OVERFLOWS, ROUNDINGS, fixed_format
from fftgauge.harness.fixed.radix2 import SCALINGS, FixedRadix2, real_part

__all__ = ["FixedRadix2Backend"]

_SHIFT_OF = {"none": 0, "input": "log2n", "stage": "log2n", "bfp": "block"}


class FixedRadix2Backend(Backend):
    """Q15/Q31 radix-2 decimation in time with a chosen scaling, rounding and overflow rule."""

    name = "radix2-fixed"
    description = "built-in fixed-point (Q15/Q31) radix-2 DIT in numpy integer arithmetic"
    options = {
        "scaling": OptionSpec(str, "stage", "scaling rule", choices=SCALINGS),
        "rounding": OptionSpec(str, "round-half-up", "rounding rule of every shift", choices=ROUNDINGS),
        "overflow": OptionSpec(str, "saturate", "overflow rule after every stage", choices=OVERFLOWS),
        "twiddle_bits": OptionSpec(int, 0, "twiddle width in bits (0: the format's)", minimum=0),
        "declare_shift": OptionSpec(str, "", "output shift to declare instead of the true one (bits, log2n)"),
    }

    @property
    def version(self) -> str:
        """The adapter's version (it is part of fftgauge)."""
        from fftgauge import __version__
        return __version__

    def capabilities(self) -> Capabilities:
        """Return fft, ifft, rfft and irfft in q15 and q31 at powers of two from 1 to 2**20, with
        the declared scaling."""
        scaling = self.opts["scaling"]
        shift = self.opts["declare_shift"] or _SHIFT_OF[scaling]
        return Capabilities(kinds=("fft", "ifft", "rfft", "irfft"), dtypes=("q15", "q31"),
                            sizes=SizeRule("pow2", 1, 1 << 20),
                            norms=("backward",),
                            fixed=FixedScaling(output_shift=shift, scaling=scaling, rounding=self.opts["rounding"]))

    def transform_of(self, dtype: str) -> FixedRadix2:
        """Return the configured :class:`FixedRadix2` of precision ``dtype``."""
        fmt = fixed_format(dtype)
        bits = self.opts["twiddle_bits"] or None
        return FixedRadix2(fmt, self.opts["scaling"], self.opts["rounding"], self.opts["overflow"],
                           min(bits, fmt.bits) if bits else None)

    def plan(self, case):
        """Return a plan whose execute returns the output (pairs; an irfft's ``n`` integers) and,
        for ``bfp``, the exponent with it."""
        fft = self.transform_of(case.dtype)
        kind, n = case.kind, case.n

        def output(x):
            result = fft.run(kind, x, n)
            return result, (real_part(result.pairs) if kind == "irfft" else result.pairs)

        if self.opts["scaling"] == "bfp":
            def run(x):
                result, values = output(x)
                return values, result.exponent
            return FunctionPlan(case, run)
        return FunctionPlan(case, lambda x: output(x)[1])
