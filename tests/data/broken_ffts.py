"""Deliberately broken FFTs, for the tests of the checks and of the diagnosis.

Each plain callable ``f(x) -> X`` is loaded through a file SPEC such as
``tests/data/broken_ffts.py:bitreversed_fft`` and wrapped by the registry as a forward
complex FFT backend (``kind=fft``, ``norm=backward``). Each one has exactly one classic bug;
the numpy transform underneath is otherwise right. The ``Backend`` subclasses at the end
break a kind other than the forward complex one (an inverse without its 1/N, ...).
"""

from __future__ import annotations

import threading
import time

import numpy as np

from fftgauge.backends.base import Backend, Capabilities, FunctionPlan, Plan
from fftgauge.harness.cases import Case


def _next_pow2(n: int) -> int:
    return 1 << max(0, (n - 1).bit_length())


def opposite_sign_fft(x):
    """Uses exp(+2j pi k n / N): the inverse transform without its 1/N."""
    return np.fft.ifft(x) * len(x)


def conjugated_fft(x):
    """Returns the complex conjugate of the right answer."""
    return np.conj(np.fft.fft(x))


def bitreversed_fft(x):
    """Radix-2 decimation in frequency without the final bit-reversal reordering (powers of two only)."""
    a = np.array(x, dtype=np.result_type(x, np.complex64), copy=True)
    n = a.shape[0]
    if n & (n - 1):
        raise ValueError(f"bitreversed_fft handles powers of two only, got {n}")
    half = n // 2
    while half >= 1:
        a = a.reshape(-1, 2 * half)
        top, bottom = a[:, :half].copy(), a[:, half:].copy()
        w = np.exp(-2j * np.pi * np.arange(half) / (2 * half)).astype(a.dtype)
        a[:, :half] = top + bottom
        a[:, half:] = (top - bottom) * w
        half //= 2
    return a.reshape(n)  # still in bit-reversed order: the reordering step is missing


def fftshifted_fft(x):
    """Returns the spectrum centred (fftshift applied), as a plotting helper would."""
    return np.fft.fftshift(np.fft.fft(x))


def float32_fft(x):
    """Computes in single precision, then hands back an array of the input's dtype."""
    return np.fft.fft(np.asarray(x).astype(np.complex64)).astype(np.result_type(x, np.complex64))


def padded_fft(x):
    """Zero-pads to the next power of two and returns that longer transform."""
    return np.fft.fft(x, _next_pow2(len(x)))


def padded_truncated_fft(x):
    """Zero-pads to the next power of two and returns the first N of its outputs."""
    n = len(x)
    return np.fft.fft(x, _next_pow2(n))[:n]


def real_only_fft(x):
    """Drops the imaginary part of the input."""
    return np.fft.fft(np.real(x))


def ortho_scaled_fft(x):
    """Applies the 1/sqrt(N) of norm='ortho' to a backward-normalised forward transform."""
    return np.fft.fft(x) / np.sqrt(len(x))


def affine_fft(x):
    """Adds a constant to every output (a leftover bias): not linear."""
    return np.fft.fft(x) + 1.0


def mirrored_fft(x):
    """Fills the upper half of the spectrum as a mirror of the lower half, without the conjugate."""
    X = np.fft.fft(x)
    n = len(X)
    k = np.arange(1, (n + 1) // 2)
    X[n - k] = X[k]
    return X


def inplace_fft(x):
    """Uses the caller's array as scratch: the input is overwritten by the output."""
    X = np.fft.fft(x)
    x[...] = X.astype(x.dtype)
    return X


_NOISE = np.random.default_rng()


def noisy_fft(x):
    """Adds noise of one unit roundoff: accurate, but never the same twice."""
    X = np.fft.fft(x)
    eps = np.finfo(X.dtype).eps
    noise = eps * (_NOISE.standard_normal(X.shape) + 1j * _NOISE.standard_normal(X.shape))
    return (X * (1 + noise)).astype(X.dtype)


_SCRATCH: dict = {}


def shared_scratch_fft(x):
    """Copies the input into a module-level scratch buffer shared by every call, without a lock."""
    n = len(x)
    buf = _SCRATCH.setdefault((n, np.asarray(x).dtype.str), np.empty(n, dtype=np.asarray(x).dtype))
    buf[:] = x
    time.sleep(0)  # let another thread in between the write and the read
    time.sleep(0.0005)
    return np.fft.fft(buf)


def nan_to_zero_fft(x):
    """Replaces NaN (and Inf) in the input by finite numbers before transforming."""
    return np.fft.fft(np.nan_to_num(x, nan=0.0))


def nan_output_fft(x):
    """Gives one NaN in its output for every input (a 0/0 in a special case)."""
    X = np.fft.fft(x)
    X[-1] = np.nan
    return X


def float32_output_fft(x):
    """Returns a single-precision array whatever the input's precision."""
    return np.fft.fft(x).astype(np.complex64)


def short_fft(x):
    """Drops the last output."""
    return np.fft.fft(x)[:-1]


def stride_blind_fft(x):
    """Reads the memory the array lives in, in order, ignoring its strides."""
    x = np.asarray(x)
    if x.base is not None and isinstance(x.base, np.ndarray):
        flat = x.base.reshape(-1)
        if flat.dtype == x.dtype and flat.size >= x.size:
            return np.fft.fft(flat[: x.size])
    return np.fft.fft(x)


# -- adapters that break another kind --------------------------------------------------------

class _NumpyLike(Backend):
    """numpy.fft with backward normalisation only; subclasses replace one kind."""

    description = "numpy.fft with one kind broken on purpose"

    def capabilities(self) -> Capabilities:
        return Capabilities(norms=("backward",))

    def transform(self, case: Case):
        fn = getattr(np.fft, case.kind)
        n = case.n
        return lambda x: fn(x, n=n)

    def plan(self, case: Case) -> Plan:
        return FunctionPlan(case, self.transform(case))


class MissingInverseScaleBackend(_NumpyLike):
    """ifft (and irfft) without the 1/N."""

    name = "missing-inverse-scale"

    def transform(self, case: Case):
        n = case.n
        if case.kind == "ifft":
            return lambda x: np.fft.ifft(x) * n
        if case.kind == "irfft":
            return lambda x: np.fft.irfft(x, n) * n
        return super().transform(case)


class SameSignInverseBackend(_NumpyLike):
    """ifft computed as fft / N: the right scale, the wrong exponent sign."""

    name = "same-sign-inverse"

    def capabilities(self) -> Capabilities:
        return Capabilities(kinds=("fft", "ifft"), norms=("backward",))

    def transform(self, case: Case):
        n = case.n
        if case.kind == "ifft":
            return lambda x: np.fft.fft(x) / n
        return super().transform(case)


class ReusedBufferBackend(_NumpyLike):
    """Correct, and returns the same output buffer every call (as Plan allows): not for sharing
    between threads, but separate plans are independent."""

    name = "reused-buffer"

    def plan(self, case: Case) -> Plan:
        return _ReusedBufferPlan(case, super().transform(case))


class _ReusedBufferPlan(Plan):
    def __init__(self, case: Case, fn):
        super().__init__(case)
        self._fn = fn
        self._out = np.empty(case.output_length, dtype=case.output_dtype)
        self._lock = threading.Lock()

    def execute(self, x: np.ndarray) -> np.ndarray:
        with self._lock:
            self._out[...] = self._fn(x)
        return self._out


class InPlaceDeclaredBackend(_NumpyLike):
    """Overwrites its input, and says so (capabilities in_place=True)."""

    name = "in-place-declared"

    def capabilities(self) -> Capabilities:
        return Capabilities(norms=("backward",), in_place=True)

    def transform(self, case: Case):
        inner = super().transform(case)

        def run(x):
            out = inner(x)
            x[...] = 0
            return out

        return run


class RaisingIfftBackend(_NumpyLike):
    """fft works; planning ifft works but executing it raises."""

    name = "raising-ifft"

    def capabilities(self) -> Capabilities:
        return Capabilities(kinds=("fft", "ifft"), norms=("backward",))

    def transform(self, case: Case):
        if case.kind == "ifft":
            def boom(x):
                raise RuntimeError("ifft exploded")
            return boom
        return super().transform(case)


class PlanRaisesBackend(_NumpyLike):
    """Every plan() raises."""

    name = "plan-raises"

    def plan(self, case: Case) -> Plan:
        raise MemoryError("no room for a plan")


class ListOutputBackend(_NumpyLike):
    """Returns Python lists instead of arrays (right values)."""

    name = "list-output"

    def transform(self, case: Case):
        inner = super().transform(case)
        return lambda x: list(inner(x))


class NoneOutputBackend(_NumpyLike):
    """Returns None."""

    name = "none-output"

    def transform(self, case: Case):
        return lambda x: None
