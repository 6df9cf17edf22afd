"""The direct DFT: the defining sum, evaluated as a matrix-vector product.

X[k] = sum_m x[m] W^(k m), W = exp(-2j pi / N) (``+`` for the inverse kinds), for any N.
The matrix W[k, m] = exp(-2j pi ((k m) mod N) / N) is built with the exponent ``k m``
reduced modulo N in exact integer arithmetic *before* the angle is formed: the angle then
lies in [0, 2 pi) and is rounded once, instead of a large angle 2 pi k m / N whose rounding
error grows with k m. The product runs in complex128 whatever the case's precision, and the
output is rounded to the case's dtype (so a float32 case is more accurate than a native
float32 transform would be, as befits a reference).

Choices this reference makes (and documents):

- **Memory**: the matrix takes 16 N^2 bytes. Rows are built and applied in blocks of at
  most :data:`BLOCK_BYTES`, so memory stays bounded at any N; the whole matrix is kept in
  the plan (built at plan time) only when it fits in one block. Time is O(N^2) all the
  same, so the backend claims sizes up to :data:`MAX_N` only.
- **Real kinds**: ``rfft`` multiplies the real input (promoted to complex) by the first
  N//2 + 1 rows only; ``irfft`` builds the full Hermitian spectrum (imaginary parts of X[0]
  and, for even N, of X[N/2] ignored), applies the full inverse matrix and keeps the real
  part.
- **Normalisation**: one multiplication by a real factor after the sum.

Counting mode does not use the matrix product (whose arithmetic is BLAS's business): it
evaluates the same sum term by term in a plain Python double loop and counts each complex
multiplication x[m] * W^(km) and each complex addition it performs, N^2 and N (N - 1) for a
complex transform of length N (rows x N and rows x (N - 1) for ``rfft``, which computes
N//2 + 1 rows). With ``count_trivial=False`` the products by W^0 = 1 (those with
k m = 0 mod N) are skipped and not counted. Scaling adds 2 real multiplications per complex
output (1 per real ``irfft`` output). The counted sum returns its result too, so a test can
confirm it computes the same transform.
"""

from __future__ import annotations

import numpy as np

from fftgauge.backends.axis_passes import AxisPassPlan, plan_axis_passes
from fftgauge.backends.base import Backend, Capabilities, OpCount, Plan
from fftgauge import __version__
from fftgauge.harness import dft
from fftgauge.harness.cases import Case, norm_factor
from fftgauge.harness.shapes.case import SHAPE_KINDS, ShapeCase
from fftgauge.harness.timing.opcount import OperationTally

#: Largest size the direct DFT claims: O(N^2) time and memory traffic (a 4096-point
#: transform gathers 16.8 million matrix entries).
MAX_N = 4096

#: Largest shaped case (total points of the array) the direct DFT takes, axis by axis.
MAX_SHAPED_POINTS = 2**16

#: Largest block of the DFT matrix built at once, in bytes (32 MiB: 2048 rows at N = 1024).
BLOCK_BYTES = 32 * 2**20


def dft_matrix_rows(n: int, rows: np.ndarray, inverse: bool) -> np.ndarray:
    """Return the rows ``rows`` of the length-``n`` DFT matrix, complex128.

    Entry [i, m] is exp(-2j pi ((rows[i] * m) mod n) / n) (``+2j`` when ``inverse``); the
    exponent is reduced modulo n in integer arithmetic before the angle is formed, and the
    entry is looked up in the table of the n distinct powers of W (:func:`unit_roots`).
    """
    k = np.asarray(rows, dtype=np.int64)[:, None]
    m = np.arange(n, dtype=np.int64)[None, :]
    return unit_roots(n, inverse)[(k * m) % n]


def unit_roots(n: int, inverse: bool) -> np.ndarray:
    """Return W^r = exp(-2j pi r / n), r = 0 .. n-1, complex128 (``+2j`` when ``inverse``).

    Each value is computed directly from its angle, which lies in [0, 2 pi).
    """
    sign = 1.0 if inverse else -1.0
    angle = sign * 2.0 * np.pi * np.arange(n) / n
    return np.cos(angle) + 1j * np.sin(angle)


def hermitian_spectrum(half_spectrum: np.ndarray, n: int) -> np.ndarray:
    """Return the full length-``n`` spectrum (complex128) of a real signal from its first n//2 + 1 values.

    X[n-k] = conj(X[k]); the imaginary part of X[0], and of X[n/2] for even n, is dropped.
    """
    return dft.hermitian_full(half_spectrum, n, np.complex128)


def _block_rows(n: int) -> int:
    """Return how many matrix rows of length n fit in :data:`BLOCK_BYTES`."""
    return max(1, BLOCK_BYTES // (16 * n))


class DirectPlan(Plan):
    """The direct DFT of one case; keeps the DFT matrix when it fits in one block."""

    def __init__(self, case: Case):
        super().__init__(case)
        self.rows = case.n // 2 + 1 if case.kind == "rfft" else case.n
        self.scale = float(norm_factor(case.n, case.norm, case.is_inverse))
        self.matrix = None
        if self.rows <= _block_rows(case.n):
            self.matrix = dft_matrix_rows(case.n, np.arange(self.rows), case.is_inverse)

    def _vector(self, x: np.ndarray) -> np.ndarray:
        """Return the complex128 vector the matrix is applied to."""
        if self.case.kind == "irfft":
            return hermitian_spectrum(np.asarray(x, dtype=np.complex128), self.case.n)
        return np.asarray(x, dtype=np.complex128)

    def _finish(self, y: np.ndarray) -> np.ndarray:
        """Return ``y`` (the unscaled sum) as the case's output: real part, scale, dtype."""
        if self.case.kind == "irfft":
            y = y.real
        if self.scale != 1.0:
            y = y * self.scale
        return y.astype(self.case.output_dtype)

    def execute(self, x: np.ndarray) -> np.ndarray:
        """Return the direct DFT of ``x`` rounded to the case's output dtype."""
        vector = self._vector(x)
        if self.matrix is not None:
            return self._finish(self.matrix @ vector)
        y = np.empty(self.rows, dtype=np.complex128)
        step = _block_rows(self.case.n)
        for first in range(0, self.rows, step):
            rows = np.arange(first, min(first + step, self.rows))
            y[rows] = dft_matrix_rows(self.case.n, rows, self.case.is_inverse) @ vector
        return self._finish(y)

    def execute_counted(self, x: np.ndarray, count_trivial: bool = True) -> tuple[np.ndarray, OpCount]:
        """Return the DFT of ``x`` evaluated term by term in Python, and the operations it performed."""
        tally = OperationTally()
        values = self._vector(x).tolist()
        y = np.array(direct_sum(values, self.rows, self.case.is_inverse, tally,
                                skip_unit_twiddle=not count_trivial), dtype=np.complex128)
        if self.scale != 1.0:
            tally.extra_real_mults += len(y) * (1 if self.case.kind == "irfft" else 2)
        return self._finish(y), tally.to_opcount(count_trivial)


def direct_sum(values: list[complex], rows: int, inverse: bool, tally: OperationTally | None = None,
               skip_unit_twiddle: bool = False) -> list[complex]:
    """Return X[k] = sum_m values[m] W^(k m) for k = 0 .. rows-1, term by term in Python.

    W = exp(-2j pi / n) (``+`` when ``inverse``), n = len(values); each product and each
    addition performed is counted in ``tally``. With ``skip_unit_twiddle`` the products by
    W^0 = 1 are not performed.
    """
    n = len(values)
    twiddles = unit_roots(n, inverse).tolist()
    out = []
    for k in range(rows):
        total = None
        for m, value in enumerate(values):
            exponent = (k * m) % n
            if exponent == 0 and skip_unit_twiddle:
                term = value
            else:
                term = value * twiddles[exponent]
                if tally is not None:
                    tally.complex_mults += 1
            if total is None:
                total = term
            else:
                total = total + term
                if tally is not None:
                    tally.complex_adds += 1
        out.append(total)
    return out


def counting_input(case: Case) -> np.ndarray:
    """Return the fixed input counting mode runs on (a ramp; the counts do not depend on it)."""
    ramp = np.arange(case.input_length, dtype=np.float64)
    if case.kind == "rfft":
        return ramp.astype(case.input_dtype)
    return (ramp + 0.5j * ramp[::-1]).astype(case.input_dtype)


class DirectBackend(Backend):
    """The direct DFT by its defining sum (matrix method, numpy), any size up to :data:`MAX_N`."""

    name = "direct"
    description = "direct DFT by its defining sum (O(N^2) matrix product), any size, reference"

    @property
    def version(self) -> str:
        return __version__

    def capabilities(self) -> Capabilities:
        return Capabilities(dtypes=("float32", "float64"), sizes="any", max_n=MAX_N,
                            pure_python=True, separate_planning=True, counts_operations=True,
                            shaped_kinds=SHAPE_KINDS, max_shaped_points=MAX_SHAPED_POINTS)

    def plan(self, case: Case) -> DirectPlan:
        return DirectPlan(case)

    def plan_shaped(self, case: ShapeCase) -> AxisPassPlan:
        """Return the direct DFT of every line along each transformed axis in turn
        (:func:`~fftgauge.backends.axis_passes.plan_axis_passes`)."""
        return plan_axis_passes(self, case)

    def count_operations(self, case: Case, count_trivial: bool = True) -> OpCount:
        """Run ``case`` once on a fixed input through the counted sum and return its operations.

        Pure Python, n**2 iterations: about a second at n = 1024.
        """
        return self.plan(case).execute_counted(counting_input(case), count_trivial)[1]
