"""The radix-2 FFT written out in plain Python, to be read and compared against.

This is the reference a firmware engineer holds their own radix-2 routine up to: every
loop is the textbook one, on a Python list of Python ``complex`` numbers, with no numpy in
the arithmetic. Two orderings of the same butterflies are provided:

- **Decimation in time** (Cooley & Tukey, "An algorithm for the machine calculation of
  complex Fourier series", Math. Comp. 19 (1965) 297-301): the *input* is put in
  bit-reversed order, then log2 N stages of butterflies run on spans 2, 4, ..., N. The
  butterfly of span ``m`` on the pair (``top``, ``bottom = top + m/2``) is::

      product      = W_m^j * x[bottom]
      x[top]       = x[top] + product
      x[bottom]    = x[top] - product          (with the old x[top])

- **Decimation in frequency** (Gentleman & Sande, "Fast Fourier transforms for fun and
  profit", AFIPS Fall Joint Computer Conference 1966): the stages run on spans
  N, N/2, ..., 2 and the *output* comes out in bit-reversed order, which is then undone::

      x[top]       = x[top] + x[bottom]
      x[bottom]    = W_m^j * (x[top] - x[bottom])   (with the old x[top])

Here ``W_m^j = exp(-2j pi j / m) = W_N^(j N/m)`` is the twiddle factor, read from a table of
``W_N^k``, k = 0 .. N/2 - 1, built once at plan time together with the permutation.

Choices this reference makes (and documents):

- **Inverse transforms** use their own twiddle table, ``exp(+2j pi k / N)`` (not the
  conjugation trick), so the inverse runs the very same butterflies.
- **Real kinds** are computed by promotion to complex: ``rfft`` runs the complex FFT of the
  real signal and keeps the first N/2 + 1 outputs; ``irfft`` builds the full Hermitian
  spectrum from the N/2 + 1 inputs (the imaginary parts of X[0], and of X[N/2] for even N,
  are ignored), runs the complex inverse FFT and keeps the real part. No packing trick.
- **Normalisation** (``backward``, ``ortho``, ``forward``) is one multiplication by a real
  factor after the transform.
- **Precision**: the arithmetic is Python ``complex`` (IEEE double) whatever the case's
  precision; the output is then rounded to the case's dtype. A ``float32`` case is thus
  computed in double and rounded once, so it is *more* accurate than a native float32 FFT;
  that is what a reference should be.
- **Sizes**: powers of two only, up to :data:`MAX_N` (pure Python is slow).

Counting mode: the same loops take an optional :class:`fftgauge.harness.timing.opcount.OperationTally` and
increment it for every complex multiplication and addition they perform (a butterfly is 1
complex multiplication by its twiddle and 2 complex additions, one of them a subtraction).
With ``count_trivial=False`` the multiplication by W^0 = 1 is skipped (not performed and
not counted); W^0 is the only twiddle treated as trivial. Scaling by the normalisation
factor adds 2 real multiplications per complex output (1 per real ``irfft`` output).
Promotion of real input, building the Hermitian spectrum (copies and sign flips) and taking
real parts perform no arithmetic and count nothing; so ``rfft``/``irfft`` count exactly
what the complex FFT of length N costs, plus scaling.
"""

from __future__ import annotations

import cmath
import math

import numpy as np

from fftgauge.backends.axis_passes import AxisPassPlan, plan_axis_passes
from fftgauge.backends.base import Backend, Capabilities, OpCount, Plan
from fftgauge import __version__
from fftgauge.harness import dft
from fftgauge.harness.cases import Case, norm_factor
from fftgauge.harness.shapes.case import SHAPE_KINDS, ShapeCase
from fftgauge.harness.timing.opcount import OperationTally

#: Largest size the pure-Python reference claims: a 2**14-point transform is about
#: 115,000 butterflies, a fraction of a second in CPython.
MAX_N = 2**14

#: Largest shaped case (total points of the array) it takes, axis by axis: a 64x64 array is
#: 128 pure-Python transforms of 64 points per call.
MAX_SHAPED_POINTS = 2**12


def bit_reverse_permutation(n: int) -> list[int]:
    """Return the bit-reversal permutation of ``0 .. n-1`` for ``n = 2**t``.

    Entry ``i`` is ``i`` with its t binary digits written in reverse order; for n = 8 this
    is ``[0, 4, 2, 6, 1, 5, 3, 7]``. The permutation is its own inverse.

    Raises
    ------
    ValueError
        When ``n`` is not a power of two.
    """
    return dft.bit_reversal_permutation(n).tolist()


def permute_in_place(data: list, permutation: list[int]) -> None:
    """Reorder ``data`` so that ``data[i]`` becomes the old ``data[permutation[i]]``.

    ``permutation`` must be an involution (as bit reversal is): each pair is swapped once.
    """
    for index, partner in enumerate(permutation):
        if index < partner:
            data[index], data[partner] = data[partner], data[index]


def twiddle_table(n: int, inverse: bool = False) -> list[complex]:
    """Return the twiddle factors ``W_n^k = exp(-2j pi k / n)``, k = 0 .. n/2 - 1.

    With ``inverse=True`` the factors are ``exp(+2j pi k / n)``. For n = 1 the table is empty.
    """
    # Each factor is computed directly from its angle, never by a recurrence
    # w_k = w_(k-1) * w_1: with direct evaluation the rms error of the FFT grows like
    # eps * sqrt(log N), while recurrences make the twiddle error, and so the FFT error,
    # grow much faster with N (Schatzman, "Accuracy of the discrete Fourier transform and
    # the fast Fourier transform", SIAM J. Sci. Comput. 17(5) (1996) 1150-1166).
    sign = 1.0 if inverse else -1.0
    return [cmath.exp(complex(0.0, sign * 2.0 * math.pi * k / n)) for k in range(n // 2)]


# -- decimation in time ----------------------------------------------------------------------

def dit_butterfly(data: list[complex], top: int, bottom: int, twiddle: complex | None,
                  tally: OperationTally | None = None) -> None:
    """Apply one decimation-in-time butterfly to ``data[top]`` and ``data[bottom]`` in place.

    ``twiddle=None`` stands for W^0 = 1 with the multiplication skipped.
    """
    if twiddle is None:
        product = data[bottom]
    else:
        product = twiddle * data[bottom]
        if tally is not None:
            tally.complex_mults += 1
    upper = data[top]
    data[top] = upper + product
    data[bottom] = upper - product
    if tally is not None:
        tally.complex_adds += 2


def dit_stage(data: list[complex], span: int, twiddles: list[complex],
              tally: OperationTally | None = None, skip_unit_twiddle: bool = False) -> None:
    """Run every decimation-in-time butterfly of span ``span`` (2, 4, ..., N) over ``data``."""
    n = len(data)
    half = span // 2
    stride = n // span  # W_span^j = W_n^(j * stride)
    for start in range(0, n, span):
        for j in range(half):
            twiddle = None if (j == 0 and skip_unit_twiddle) else twiddles[j * stride]
            dit_butterfly(data, start + j, start + j + half, twiddle, tally)


def fft_dit_in_place(data: list[complex], twiddles: list[complex], permutation: list[int],
                     tally: OperationTally | None = None, skip_unit_twiddle: bool = False) -> None:
    """Transform ``data`` (length N = 2**t) in place by decimation in time.

    Bit-reverse the input, then run the stages of span 2, 4, ..., N. ``twiddles`` is
    :func:`twiddle_table` of N (its inverse table for the inverse transform) and
    ``permutation`` is :func:`bit_reverse_permutation` of N. The result is unscaled.
    """
    permute_in_place(data, permutation)
    span = 2
    while span <= len(data):
        dit_stage(data, span, twiddles, tally, skip_unit_twiddle)
        span *= 2


# -- decimation in frequency -----------------------------------------------------------------

def dif_butterfly(data: list[complex], top: int, bottom: int, twiddle: complex | None,
                  tally: OperationTally | None = None) -> None:
    """Apply one decimation-in-frequency butterfly to ``data[top]`` and ``data[bottom]`` in place.

    ``twiddle=None`` stands for W^0 = 1 with the multiplication skipped.
    """
    upper, lower = data[top], data[bottom]
    data[top] = upper + lower
    difference = upper - lower
    if tally is not None:
        tally.complex_adds += 2
    if twiddle is None:
        data[bottom] = difference
    else:
        data[bottom] = twiddle * difference
        if tally is not None:
            tally.complex_mults += 1


def dif_stage(data: list[complex], span: int, twiddles: list[complex],
              tally: OperationTally | None = None, skip_unit_twiddle: bool = False) -> None:
    """Run every decimation-in-frequency butterfly of span ``span`` (N, N/2, ..., 2) over ``data``."""
    n = len(data)
    half = span // 2
    stride = n // span  # W_span^j = W_n^(j * stride)
    for start in range(0, n, span):
        for j in range(half):
            twiddle = None if (j == 0 and skip_unit_twiddle) else twiddles[j * stride]
            dif_butterfly(data, start + j, start + j + half, twiddle, tally)


def fft_dif_in_place(data: list[complex], twiddles: list[complex], permutation: list[int],
                     tally: OperationTally | None = None, skip_unit_twiddle: bool = False) -> None:
    """Transform ``data`` (length N = 2**t) in place by decimation in frequency.

    Run the stages of span N, N/2, ..., 2, then undo the bit-reversed order of the output.
    Arguments as for :func:`fft_dit_in_place`. The result is unscaled.
    """
    span = len(data)
    while span >= 2:
        dif_stage(data, span, twiddles, tally, skip_unit_twiddle)
        span //= 2
    permute_in_place(data, permutation)


# -- the four kinds --------------------------------------------------------------------------

def hermitian_spectrum(half_spectrum: list[complex], n: int) -> list[complex]:
    """Return the full length-``n`` spectrum of a real signal from its first ``n//2 + 1`` values.

    X[n-k] = conj(X[k]); the imaginary part of X[0], and of X[n/2] for even n, is dropped
    (a real signal has none there).
    """
    return dft.hermitian_full(np.asarray(half_spectrum, dtype=np.complex128), n).tolist()


_TRANSFORMS = {"time": fft_dit_in_place, "frequency": fft_dif_in_place}


class Radix2Plan(Plan):
    """A radix-2 transform of one case: permutation, twiddles and scale factor fixed at plan time."""

    def __init__(self, case: Case, decimation: str):
        super().__init__(case)
        self.decimation = decimation
        self.permutation = bit_reverse_permutation(case.n)
        self.twiddles = twiddle_table(case.n, inverse=case.is_inverse)
        self.scale = float(norm_factor(case.n, case.norm, case.is_inverse))
        self._transform = _TRANSFORMS[decimation]

    def compute(self, values: list, tally: OperationTally | None = None,
                skip_unit_twiddle: bool = False) -> list:
        """Return the transform of ``values`` (Python numbers) as a list of Python numbers.

        Complex for ``fft``/``ifft``/``rfft``, real (float) for ``irfft``; scaled by the norm.
        """
        n = self.case.n
        if self.case.kind == "irfft":
            data = hermitian_spectrum(values, n)
        else:
            data = [complex(v) for v in values]  # promotes a real rfft input to complex
        self._transform(data, self.twiddles, self.permutation, tally, skip_unit_twiddle)
        if self.case.kind == "rfft":
            data = data[: n // 2 + 1]
        elif self.case.kind == "irfft":
            data = [v.real for v in data]
        if self.scale != 1.0:
            data = [self._scaled(v) for v in data]
            if tally is not None:
                tally.extra_real_mults += len(data) * (1 if self.case.kind == "irfft" else 2)
        return data

    def _scaled(self, value: complex | float) -> complex | float:
        """Return ``value`` times the real norm factor (2 real products for a complex value)."""
        if isinstance(value, complex):
            return complex(self.scale * value.real, self.scale * value.imag)
        return self.scale * value

    def execute(self, x: np.ndarray) -> np.ndarray:
        """Return the transform of ``x`` rounded to the case's output dtype."""
        return np.array(self.compute(np.asarray(x).tolist()), dtype=self.case.output_dtype)

    def execute_counted(self, x: np.ndarray, count_trivial: bool = True) -> tuple[np.ndarray, OpCount]:
        """Return the transform of ``x`` and the operations performed to compute it."""
        tally = OperationTally()
        out = self.compute(np.asarray(x).tolist(), tally, skip_unit_twiddle=not count_trivial)
        return np.array(out, dtype=self.case.output_dtype), tally.to_opcount(count_trivial)


def counting_input(case: Case) -> np.ndarray:
    """Return the fixed input counting mode runs on (a ramp; the counts do not depend on it)."""
    ramp = np.arange(case.input_length, dtype=np.float64)
    if case.kind == "rfft":
        return ramp.astype(case.input_dtype)
    return (ramp + 0.5j * ramp[::-1]).astype(case.input_dtype)


class _Radix2Backend(Backend):
    """The pure-Python radix-2 reference; subclasses fix the decimation."""

    decimation = "time"

    @property
    def version(self) -> str:
        return __version__

    def capabilities(self) -> Capabilities:
        return Capabilities(dtypes=("float32", "float64"), sizes="pow2", max_n=MAX_N,
                            pure_python=True, separate_planning=True, counts_operations=True,
                            shaped_kinds=SHAPE_KINDS, max_shaped_points=MAX_SHAPED_POINTS)

    def plan(self, case: Case) -> Radix2Plan:
        return Radix2Plan(case, self.decimation)

    def plan_shaped(self, case: ShapeCase) -> AxisPassPlan:
        """Return this radix-2 FFT of every line along each transformed axis in turn
        (:func:`~fftgauge.backends.axis_passes.plan_axis_passes`); powers of two along each axis."""
        return plan_axis_passes(self, case)

    def count_operations(self, case: Case, count_trivial: bool = True) -> OpCount:
        """Run ``case`` once on a fixed input in counting mode and return the operations performed."""
        return self.plan(case).execute_counted(counting_input(case), count_trivial)[1]


class Radix2DitBackend(_Radix2Backend):
    """Radix-2 decimation in time (Cooley & Tukey 1965), pure Python, reference."""

    name = "radix2-dit"
    description = "pure-Python radix-2 decimation-in-time FFT (Cooley-Tukey), readable reference"
    decimation = "time"


class Radix2DifBackend(_Radix2Backend):
    """Radix-2 decimation in frequency (Gentleman & Sande 1966), pure Python, reference."""

    name = "radix2-dif"
    description = "pure-Python radix-2 decimation-in-frequency FFT (Gentleman-Sande), readable reference"
    decimation = "frequency"
