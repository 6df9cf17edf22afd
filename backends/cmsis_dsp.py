"""Arm's CMSIS-DSP library through its Python wrapper ``cmsisdsp`` (``pip install 'fftgauge[cmsis]'``).

Complex FFTs (``arm_cfft_*``), sizes the library documents for them: powers of two from 16
to 4096 (``arm_cfft_init_*`` refuses 8 and 8192; checked in tests/test_fixed_point.py):

* ``q15``, ``q31``: ``arm_cfft_q15``/``arm_cfft_q31`` forward (``ifftFlag`` 0) and inverse
  (``ifftFlag`` 1) on interleaved ``re, im`` integers (our ``(n, 2)`` pairs in C order).
  CMSIS-DSP documents the output format per size in the description of ``arm_cfft_q15`` /
  ``arm_cfft_q31`` (the tables "Input and Output formats for CFFT Q15" and "... Q31", which
  the documentation gives for the CFFT and the CIFFT alike: a 1.15 input gives 5.11 at
  N = 16, 7.9 at 64, 9.7 at 256, 11.5 at 1024; "number of bits to upscale" log2 N; quoted
  from memory), so the declared output shift is ``log2n`` for both directions: 1/2 per
  stage, and the inverse's output is the unnormalised inverse DFT over N (numpy's ifft).
  Verified numerically against numpy.fft.fft/ifft of the same integers (tests/test_cmsis_fixed.py:
  the best shift is log2 N at every size 16..4096, forward and inverse, Q15 and Q31).
* ``q15``, ``q31`` real: ``arm_rfft_q15``/``arm_rfft_q31`` (``arm_rfft_init_*(S, N,
  ifftFlagR, bitReverseFlag)``; sizes 32..8192, the ``fftLenReal`` values its documentation
  lists: init refuses 16 and 16384, checked in tests/test_cmsis_fixed.py). The documentation
  of ``arm_rfft_q15``/``arm_rfft_q31`` has its own tables ("Input and Output formats for RFFT
  Q15/Q31" and for the RIFFT, from memory): the input is downscaled by 2 at every stage, so
  again ``log2n``, for rfft and irfft; verified against numpy.fft.rfft/irfft (best shift
  log2 N at every size). The forward returns the whole spectrum (2N integers, the upper half
  the mirror image); the plan keeps bins 0..N/2 as ``(N/2 + 1, 2)`` pairs. The inverse takes
  the N/2 + 1 pairs (N + 2 integers, what its split stage reads) and returns N integers.
  Their rounding is not documented; option ``rounding`` chooses the reference the battery
  compares them with (default round-half-up).
* ``float32``: ``arm_cfft_f32`` forward and inverse; the inverse divides by N, numpy's
  backward convention. Real transforms through ``arm_rfft_fast_f32`` (sizes 32..4096: its
  init refuses 16 and 8192, and a transform with a refused instance crashes the process, so
  the plan checks the status first): the half spectrum packed as ``X0.re, X(N/2).re, X1.re,
  X1.im, ...``, declared as ``packing=dc-nyquist``; the inverse divides by N. (``arm_cfft_f64`` is in the wrapper but ``arm_cfft_instance_f64``,
  which it needs, is not, in cmsisdsp 1.10.3: no float64.)
"""

from __future__ import annotations

from importlib.metadata import version as dist_version

import cmsisdsp as dsp
import numpy as np

from fftgauge.backends.base import Backend, Capabilities, Conventions, FunctionPlan, OptionSpec, SizeRule
from fftgauge.harness.fixed.declared import FixedScaling
from fftgauge.harness.fixed.formats import ROUNDINGS

__all__ = ["CmsisDspBackend"]

#: Sizes of the complex FFTs (CMSIS-DSP documentation of arm_cfft_init_*).
CFFT_SIZES = SizeRule("pow2", 16, 4096)

#: Sizes of arm_rfft_fast_f32 (its init refuses 16 and 8192).
RFFT_SIZES = SizeRule("pow2", 32, 4096)

#: Sizes of arm_rfft_q15/arm_rfft_q31 (the fftLenReal values documented; init refuses 16 and 16384).
RFFT_FIXED_SIZES = SizeRule("pow2", 32, 8192)

_FIXED = {"q15": (dsp.arm_cfft_instance_q15, dsp.arm_cfft_init_q15, dsp.arm_cfft_q15, np.int16),
          "q31": (dsp.arm_cfft_instance_q31, dsp.arm_cfft_init_q31, dsp.arm_cfft_q31, np.int32)}
_FLOAT = {"float32": (dsp.arm_cfft_instance_f32, dsp.arm_cfft_init_f32, dsp.arm_cfft_f32, np.float32)}
_REAL_FIXED = {"q15": (dsp.arm_rfft_instance_q15, dsp.arm_rfft_init_q15, dsp.arm_rfft_q15, np.int16),
               "q31": (dsp.arm_rfft_instance_q31, dsp.arm_rfft_init_q31, dsp.arm_rfft_q31, np.int32)}


class CmsisDspBackend(Backend):
    """CMSIS-DSP's complex and real FFTs: Q15/Q31 (1/2 per stage) and float32."""

    name = "cmsis-dsp"
    description = "Arm CMSIS-DSP complex and real FFTs (arm_cfft_*, arm_rfft_*) through the cmsisdsp wrapper"
    options = {"rounding": OptionSpec(str, "round-half-up", "rounding of the fixed-point reference it is judged "
                                      "against", choices=ROUNDINGS)}

    @property
    def version(self) -> str:
        """The installed ``cmsisdsp`` distribution's version."""
        return dist_version("cmsisdsp")

    def capabilities(self) -> Capabilities:
        """Return fft and ifft in float32, q15 and q31, powers of two 16..4096; rfft and irfft
        in float32 (32..4096, packed dc-nyquist) and in q15/q31 (32..8192)."""
        real_fixed = {(kind, dtype): RFFT_FIXED_SIZES for kind in ("rfft", "irfft") for dtype in _FIXED}
        return Capabilities(kinds=("fft", "ifft", "rfft", "irfft"), dtypes=("float32", "q15", "q31"),
                            sizes=CFFT_SIZES, norms=("backward",),
                            size_rules={"rfft": RFFT_SIZES, "irfft": RFFT_SIZES, **real_fixed},
                            conventions=Conventions(packing="dc-nyquist"),
                            fixed=FixedScaling("log2n", "stage", self.opts["rounding"]))

    def plan(self, case):
        """Return a plan holding an initialised ``arm_cfft_instance_*`` of size ``case.n``.

        Raises
        ------
        RuntimeError
            When ``arm_cfft_init_*`` refuses the size (status != 0).
        """
        if case.is_real:
            return self.real_fixed_plan(case) if case.dtype in _REAL_FIXED else self.real_plan(case)
        table = _FIXED if case.dtype in _FIXED else _FLOAT
        make, init, run, dtype = table[case.dtype]
        instance = make()
        status = init(instance, case.n)
        if status != 0:
            raise RuntimeError(f"arm_cfft_init for {case.dtype} refused n = {case.n} (status {status})")
        inverse = 1 if case.is_inverse else 0
        if table is _FIXED:
            def execute(x):
                flat = np.ascontiguousarray(np.asarray(x), dtype=dtype).reshape(-1).copy()
                return np.asarray(run(instance, flat, inverse, 1)).reshape(-1, 2)
        else:
            def execute(x):
                z = np.asarray(x)
                flat = np.empty(2 * case.n, dtype=dtype)
                flat[0::2], flat[1::2] = z.real, z.imag
                out = np.asarray(run(instance, flat, inverse, 1))
                return (out[0::2] + 1j * out[1::2]).astype(np.result_type(dtype, np.complex64))
        return FunctionPlan(case, execute)

    def real_fixed_plan(self, case):
        """Return a plan of ``arm_rfft_q15``/``arm_rfft_q31`` (rfft: n integers in, ``(n/2 + 1, 2)``
        pairs out; irfft: those pairs in, n integers out).

        Raises
        ------
        RuntimeError
            When ``arm_rfft_init_*`` refuses the size (status != 0).
        """
        make, init, run, dtype = _REAL_FIXED[case.dtype]
        instance = make()
        status = init(instance, case.n, 1 if case.is_inverse else 0, 1)
        if status != 0:
            raise RuntimeError(f"arm_rfft_init for {case.dtype} refused n = {case.n} (status {status})")
        half = case.n // 2 + 1
        if case.is_inverse:
            def execute(x):
                flat = np.ascontiguousarray(np.asarray(x), dtype=dtype).reshape(-1)[: 2 * half].copy()
                return np.asarray(run(instance, flat))[: case.n].copy()
        else:
            def execute(x):
                flat = np.ascontiguousarray(np.asarray(x), dtype=dtype).reshape(-1).copy()
                return np.asarray(run(instance, flat)).reshape(-1, 2)[:half].copy()
        return FunctionPlan(case, execute)

    def real_plan(self, case):
        """Return a plan of ``arm_rfft_fast_f32`` (rfft: n reals in, n packed reals out;
        irfft: the reverse).

        Raises
        ------
        RuntimeError
            When ``arm_rfft_fast_init_f32`` refuses the size (status != 0).
        """
        instance = dsp.arm_rfft_fast_instance_f32()
        status = dsp.arm_rfft_fast_init_f32(instance, case.n)
        if status != 0:
            raise RuntimeError(f"arm_rfft_fast_init_f32 refused n = {case.n} (status {status})")
        inverse = 1 if case.is_inverse else 0

        def execute(x):
            flat = np.array(np.real(x) if np.iscomplexobj(x) else x, dtype=np.float32).reshape(-1)
            return np.asarray(dsp.arm_rfft_fast_f32(instance, flat, inverse), dtype=np.float32)
        return FunctionPlan(case, execute)
