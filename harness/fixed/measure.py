"""Running a fixed-point plan and its reference over the test signals and levels.

:func:`measure_points` runs one backend plan and the built-in reference with the same
scaling on every (signal, level) of a grid and returns a :class:`Point` for each: both
outputs' :class:`~fftgauge.harness.fixed.metrics.FixedMetrics` against the exact DFT of the
quantised input (extended precision, :func:`fftgauge.harness.battery.reference.reference_transform`)
shifted by the declared output shift.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Callable, Iterable

import numpy as np

from fftgauge.harness.battery.context import OutputProblem
from fftgauge.harness.battery.reference import reference_transform
from fftgauge.harness.cases import Case
from fftgauge.harness.errors import BackendFailure
from fftgauge.harness.fixed.declared import FixedScaling
from fftgauge.harness.fixed.formats import QFormat
from fftgauge.harness.fixed.metrics import FixedMetrics, measure
from fftgauge.harness.fixed.radix2 import FixedRadix2
from fftgauge.harness.fixed.signals import LEVELS_DBFS, SIGNALS, test_signal

__all__ = ["DRAWS", "NOISE_DRAWS", "Point", "exact_output", "measure_points", "opposite_sign_output", "output_length", "read_output",
           "reference_for"]

#: Noise inputs per point (seeds ``seed .. seed + NOISE_DRAWS - 1``), their errors pooled: the
#: SQNR of one draw of a short transform (N = 16: 32 real outputs) varies by about a dB.
NOISE_DRAWS = 4

#: Draws per point of each random signal (the others: one).
DRAWS = {"noise": NOISE_DRAWS}


@dataclass(frozen=True)
class Point:
    """One signal at one level: the backend's and the reference's metrics, and whether the
    exact answer fits the format (``representable``: no exact part beyond the rails)."""

    signal: str
    level_dbfs: float
    backend: FixedMetrics
    reference: FixedMetrics
    representable: bool

    @property
    def shortfall_db(self) -> float:
        """Return how many dB the backend's SQNR is below the reference's (negative: better)."""
        return self.reference.sqnr_db - self.backend.sqnr_db


def reference_for(fmt: QFormat, declared: FixedScaling, **changes: Any) -> FixedRadix2:
    """Return the built-in reference with the declared scaling and rounding (``changes``
    override its fields: a hypothesis's other rounding or twiddle width)."""
    fields = {"fmt": fmt, "scaling": declared.scaling, "rounding": declared.rounding, **changes}
    return FixedRadix2(**fields)


def exact_output(x: np.ndarray, shift: int, kind: str = "fft", n: int | None = None) -> np.ndarray:
    """Return the exact unnormalised transform ``kind`` of the integer input ``x`` (the layout
    of :mod:`~fftgauge.harness.fixed.radix2`) divided by 2**shift, in LSBs (complex long
    double; :func:`reference_transform`, scipy on long double; the inverse kinds without
    the 1/N, i.e. norm ``forward``; an irfft's real output with zero imaginary parts). ``n``
    is the signal length (default: ``len(x)``, for ``irfft`` ``2 * (len(x) - 1)``)."""
    a = np.asarray(x)
    if kind == "rfft":
        z = a.astype(np.float64)
    else:
        z = a[:, 0].astype(np.float64) + 1j * a[:, 1].astype(np.float64)
    if n is None:
        n = 2 * (a.shape[0] - 1) if kind == "irfft" else int(a.shape[0])
    norm = "forward" if kind in ("ifft", "irfft") else "backward"
    ref = reference_transform(z, Case(kind, "float64", int(n), norm))
    return (ref.hi.astype(np.clongdouble) + ref.lo.astype(np.clongdouble)) / np.longdouble(2.0) ** shift


def opposite_sign_output(x: np.ndarray, shift: int, kind: str = "fft", n: int | None = None) -> np.ndarray:
    """Return what :func:`exact_output` would be with the opposite exponent sign: the forward
    transform for ``ifft``, the inverse for ``fft``, ``conj X`` for ``rfft`` (the real input's
    spectrum under exp(+...)), the time-reversed output ``x[-n mod N]`` for ``irfft``."""
    if kind in ("fft", "ifft"):
        return exact_output(x, shift, "ifft" if kind == "fft" else "fft", n)
    exact = exact_output(x, shift, kind, n)
    if kind == "rfft":
        return np.conj(exact)
    return exact[(-np.arange(exact.shape[0])) % exact.shape[0]]


def output_length(kind: str, n: int) -> int:
    """Return the number of output values of ``kind`` at size ``n`` (n/2 + 1 for rfft)."""
    return n // 2 + 1 if kind == "rfft" else n


def read_output(out: Any, fmt: QFormat, n: int, declared_shift: int | None, kind: str = "fft") -> tuple[np.ndarray, int]:
    """Return a plan's output as int64 pairs (``n`` of them, ``n/2 + 1`` for rfft; an irfft's
    ``n`` integers as pairs with zero imaginary parts) and the output shift of that call.

    A ``block`` backend returns ``(pairs, exponent)``; others return the pairs.

    Raises
    ------
    OutputProblem
        ``dtype`` for floats or booleans, ``shape`` for another shape (interleaved ``(2m,)``
        is accepted for complex outputs).
    BackendFailure
        For integers outside the format's range, or a block backend that returns no exponent.
    """
    if declared_shift is None:
        if not (isinstance(out, tuple) and len(out) == 2):
            raise BackendFailure("a block-floating-point backend returns (pairs, exponent); got one array")
        out, shift = out[0], int(out[1])
    else:
        shift = declared_shift
    y = np.asarray(out)
    if not np.issubdtype(y.dtype, np.integer):
        raise OutputProblem("dtype", f"a {fmt.name} transform returns integers, got dtype {y.dtype}")
    if kind == "irfft":
        if y.shape != (n,):
            raise OutputProblem("shape", f"a {fmt.name} irfft returns {n} integers, got shape {y.shape}")
        y = np.stack([y.astype(np.int64), np.zeros(n, dtype=np.int64)], axis=-1)
    m = output_length(kind, n)
    if y.shape == (2 * m,):
        y = y.reshape(m, 2)
    if y.shape != (m, 2):
        raise OutputProblem("shape", f"a {fmt.name} {kind} returns ({m}, 2) pairs, got shape {y.shape}")
    y = y.astype(np.int64)
    if y.size and (y.min() < fmt.min_int or y.max() > fmt.max_int):
        raise BackendFailure(f"output values outside the {fmt.name} range [{fmt.min_int}, {fmt.max_int}]: "
                             f"{int(y.min())}..{int(y.max())}")
    return y, shift


def measure_points(run: Callable[[np.ndarray], Any], fmt: QFormat, n: int, declared: FixedScaling,
                   reference: FixedRadix2, seed: int, signals: Iterable[str] = SIGNALS,
                   levels: Iterable[float] = LEVELS_DBFS, kind: str = "fft") -> list[Point]:
    """Return one :class:`Point` per (signal, level): ``run`` (the plan's execute) and the
    reference on the same quantised input, each judged against the exact transform ``kind``
    with its shift (the random signals: :data:`DRAWS` draws, pooled: one SQNR over all
    their outputs).

    Raises
    ------
    OutputProblem, BackendFailure
        As :func:`read_output`; whatever ``run`` raises.
    """
    points = []
    for signal in signals:
        for level in levels:
            got, want, ref_got, ref_want, fits = [], [], [], [], True
            for draw in range(DRAWS.get(signal, 1)):
                x = test_signal(signal, n, level, fmt, seed + draw, kind)
                y, shift = read_output(run(x.copy()), fmt, n, declared.shift_at(n), kind)
                r = reference.run(kind, x, n)
                exact = exact_output(x, shift, kind, n)
                fits = fits and bool(np.all(np.abs(exact.real) <= fmt.max_int) and
                                     np.all(np.abs(exact.imag) <= fmt.max_int))
                got.append(y)
                want.append(exact)
                ref_got.append(r.pairs)
                ref_want.append(exact_output(x, r.exponent, kind, n) if r.exponent != shift else exact)
            points.append(Point(signal, float(level), measure(np.concatenate(got), np.concatenate(want), fmt),
                                measure(np.concatenate(ref_got), np.concatenate(ref_want), fmt), fits))
    return points
