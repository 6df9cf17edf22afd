"""Ground truth of a shaped case: the extended-precision 1-D reference applied axis by axis.

The multidimensional DFT is separable: with ``N_j`` the length of transformed axis ``j``,

    X[k_1..k_d] = sum_{n_1..n_d} x[n_1..n_d] exp(-2 pi i sum_j k_j n_j / N_j)
                = F_1( F_2( ... F_d(x) ... ) ),

each ``F_j`` the 1-D DFT along axis ``j`` of every line of the array (Oppenheim & Schafer,
Discrete-Time Signal Processing, and Bracewell, The Fourier Transform and Its Applications,
on the multidimensional DFT; written from memory and verified numerically against a direct
N-D DFT in mpmath in ``tests/test_shapes_reference.py``). A norm's factor is the product of
the per-axis factors, so each 1-D pass applies its own. The real kinds follow numpy and the
array API standard:

- ``rfftn``: the real FFT along the *last* listed axis (keeping ``n // 2 + 1`` bins), then
  the complex FFT along the other listed axes;
- ``irfftn``: the complex inverse FFT along every listed axis but the last, then the real
  inverse along the last, which reads only the half spectrum and ignores the imaginary parts
  of its DC and (even length) Nyquist bins, line by line, as
  :func:`fftgauge.harness.dft.clean_half_spectrum` says for 1-D.

Methods (the same choice as :func:`fftgauge.harness.battery.reference.reference_method`):

``scipy-double``      float32 cases: scipy.fft in ``complex128``.
``scipy-longdouble``  float64 cases where long double is extended: scipy.fft on
                      ``clongdouble`` (pocketfft's N-D transform is these 1-D passes).
``double-double``     longdouble cases (and float64 where long double is not extended): the
                      double-double 1-D FFT of :mod:`~fftgauge.harness.battery.double_double`
                      on every line, axis by axis, the pairs carried from one axis to the next
                      without rounding. A Python loop over lines: meant for small shapes.

Each pass's relative error is that of its 1-D reference (a few units of its working
precision times the log of the length); errors of successive passes add, so the ground truth
of ``d`` axes is about ``d`` times less exact than one 1-D reference - still some 700 times
finer than the precision under test for float64 (long double's 2^-64 against 2^-53).
"""

from __future__ import annotations

import numpy as np

from fftgauge.harness.battery.double_double import DDArray, double_double_pair_transform
from fftgauge.harness.battery.reference import (LONGDOUBLE_IS_EXTENDED, METHOD_DOUBLE, METHOD_DOUBLE_DOUBLE,
                                                METHOD_LONGDOUBLE, Reference, scipy_axis_passes)
from fftgauge.harness.cases import Case
from fftgauge.harness.shapes.case import ShapeCase

__all__ = ["SHAPED_METHOD_CHOICES", "shaped_reference", "shaped_reference_method"]

#: What ``shaped_reference(..., method=...)`` accepts.
SHAPED_METHOD_CHOICES = ("auto", "scipy-double", "scipy-longdouble", "double-double")

_NAMES = {"scipy-double": METHOD_DOUBLE, "scipy-longdouble": METHOD_LONGDOUBLE, "double-double": METHOD_DOUBLE_DOUBLE}


def shaped_reference_method(dtype: str = "float64") -> str:
    """Return the method :func:`shaped_reference` uses by default for cases of ``dtype``.

    ``scipy-double`` for float32, ``scipy-longdouble`` for float64 where long double is
    extended (else ``double-double``), ``double-double`` for longdouble.
    """
    if dtype == "float32":
        return "scipy-double"
    if dtype == "float64" and LONGDOUBLE_IS_EXTENDED:
        return "scipy-longdouble"
    return "double-double"


def shaped_reference(x: np.ndarray, case: ShapeCase, method: str = "auto") -> Reference:
    """Return the exact-ish transform of the array ``x`` for the shaped ``case``.

    Parameters
    ----------
    x : the input exactly as the backend received it, of shape ``case.input_shape``, any
        layout, any real or complex dtype. For the real forward kinds only its real part is
        used.
    case : the transform (kind, axes, lengths, norm).
    method : ``"auto"`` (:func:`shaped_reference_method`), ``"scipy-double"`` (float32 cases
        only), ``"scipy-longdouble"`` or ``"double-double"``.

    Returns
    -------
    Reference
        ``hi``/``lo`` (``complex128``, C order, read-only) of shape ``case.output_shape``;
        for the real inverse kinds their imaginary parts are zero.

    Raises
    ------
    ValueError
        For an ``x`` of the wrong shape, an unknown method, ``scipy-double`` for a case that
        is not float32, or ``scipy-longdouble`` where long double is not extended.
    """
    x = np.asarray(x)
    if x.shape != case.input_shape:
        raise ValueError(f"{case.label()}: input must have shape {case.input_shape}, got {x.shape}")
    chosen = _choose(case, method)
    if chosen == "double-double":
        hi, lo = _via_double_double(x, case)
    else:
        hi, lo = _via_scipy(x, case, np.complex128 if chosen == "scipy-double" else np.clongdouble)
    hi.setflags(write=False)
    lo.setflags(write=False)
    return Reference(hi=hi, lo=lo, method=_NAMES[chosen])


def _choose(case: ShapeCase, method: str) -> str:
    if method not in SHAPED_METHOD_CHOICES:
        raise ValueError(f"unknown shaped reference method {method!r}; expected one of "
                         f"{', '.join(SHAPED_METHOD_CHOICES)}")
    if method == "scipy-double" and case.dtype != "float32":
        raise ValueError("the scipy-double reference is only 1000 times finer than float32 cases")
    if method == "scipy-longdouble" and not LONGDOUBLE_IS_EXTENDED:
        raise ValueError("the scipy-longdouble reference needs an extended long double (eps < 1e-18) on this platform")
    return shaped_reference_method(case.dtype) if method == "auto" else method


def _via_scipy(x: np.ndarray, case: ShapeCase, wide) -> tuple[np.ndarray, np.ndarray]:
    """Return (hi, lo) of the transform by scipy.fft's 1-D passes in ``wide`` (complex128 or clongdouble)."""
    y = scipy_axis_passes(x, case.base_kind, case.axes_normalised, case.lengths, case.norm, np.dtype(wide))
    return _split(np.ascontiguousarray(y))


def _split(y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Return (hi, lo) complex128 of a real or complex array: ``hi`` rounded, ``lo = y - hi``."""
    hi = np.empty(y.shape, np.complex128)
    lo = np.empty(y.shape, np.complex128)
    parts = (y.real, y.imag) if np.iscomplexobj(y) else (y, None)
    for part, h, lw in zip(parts, (hi.real, hi.imag), (lo.real, lo.imag)):
        if part is None:
            h[...] = 0.0
            lw[...] = 0.0
            continue
        h[...] = part
        if part.dtype == np.float64:
            lw[...] = 0.0
        else:
            lw[...] = part - h
    return hi, lo


def _via_double_double(x: np.ndarray, case: ShapeCase) -> tuple[np.ndarray, np.ndarray]:
    """Return (hi, lo) of the transform by the double-double 1-D FFT on every line, axis by axis."""
    axes = case.axes_normalised
    if case.base_kind == "rfft":
        order = [axes[-1], *axes[:-1]]
    elif case.base_kind == "irfft":
        order = [*axes[:-1], axes[-1]]
    else:
        order = list(axes)
    hi = np.real(x) if case.base_kind == "rfft" else x
    lo = None
    for axis in order:
        hi, lo = _dd_along(hi, lo, axis, _line_case(case, axis))
    return np.ascontiguousarray(hi), np.ascontiguousarray(lo)


def _line_case(case: ShapeCase, axis: int) -> Case:
    """Return the 1-D case of the pass along the (non-negative) ``axis``."""
    return case.line_case(case.axes_normalised.index(axis))


def _dd_along(hi: np.ndarray, lo: np.ndarray | None, axis: int, line: Case) -> tuple[np.ndarray, np.ndarray]:
    """Return (hi, lo) after the 1-D ``line`` transform of every line along ``axis``.

    ``lo is None``: ``hi`` is the exact input (any dtype, long double included); else
    ``hi + lo`` is a double-double pair of ``complex128`` arrays.
    """
    moved_hi = np.moveaxis(hi, axis, -1)
    rows_shape = moved_hi.shape[:-1]
    flat_hi = moved_hi.reshape(-1, moved_hi.shape[-1])
    flat_lo = None if lo is None else np.moveaxis(lo, axis, -1).reshape(-1, moved_hi.shape[-1])
    out_hi = np.empty((flat_hi.shape[0], line.output_length), np.complex128)
    out_lo = np.empty_like(out_hi)
    for r in range(flat_hi.shape[0]):
        if flat_lo is None:
            z = DDArray.from_array(flat_hi[r])
        else:
            h, lw = flat_hi[r], flat_lo[r]
            z = DDArray(h.real.copy(), lw.real.copy(), h.imag.copy(), lw.imag.copy())
        out_hi[r], out_lo[r] = double_double_pair_transform(z, line)
    shape = (*rows_shape, line.output_length)
    return (np.moveaxis(out_hi.reshape(shape), -1, axis), np.moveaxis(out_lo.reshape(shape), -1, axis))
