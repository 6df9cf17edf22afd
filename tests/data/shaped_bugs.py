"""Broken batched and N-D FFTs for the shaped battery's tests: numpy.fft with one bug each.

Each is a small :class:`~fftgauge.backends.numpy_fft.NumpyBackend` subclass, so the tests can
run it in-process and the CLI can load it as ``tests/data/shaped_bugs.py:NAME``. The bug each
one carries is the kind users report of batched and N-D code; the test that uses it says which
check must catch it and with which diagnosis code.
"""

from __future__ import annotations

import os

import numpy as np

from fftgauge.backends.base import Capabilities, ShapedFunctionPlan
from fftgauge.backends.numpy_fft import NumpyBackend


class WrongAxis(NumpyBackend):
    """A batched 1-D transform that always runs along the last axis, whatever axis is asked."""

    name = "wrong-axis"

    def plan_shaped(self, case):
        if len(case.axes) == 1:
            fn, n, norm = getattr(np.fft, case.kind), case.shape[-1], case.norm
            return ShapedFunctionPlan(case, lambda x: fn(x, n=n, axis=-1, norm=norm))
        return super().plan_shaped(case)


class Transposed(NumpyBackend):
    """Right values, handed back with the axes transposed (a column-major result read as row-major)."""

    name = "transposed"

    def plan_shaped(self, case):
        inner = super().plan_shaped(case)
        return ShapedFunctionPlan(case, lambda x: np.ascontiguousarray(np.asarray(inner.execute(x)).T))


class Leaky(NumpyBackend):
    """A batch whose rows leak: each output row gets 1e-3 of the previous row's output added."""

    name = "leaky"

    def plan_shaped(self, case):
        inner = super().plan_shaped(case)
        batch_axes = [a for a in range(len(case.shape)) if a not in case.axes_normalised]

        def run(x):
            y = np.array(inner.execute(x))
            if not batch_axes:
                return y
            axis = batch_axes[0]
            previous = np.roll(y, 1, axis=axis)
            first = [slice(None)] * y.ndim
            first[axis] = 0
            previous[tuple(first)] = 0
            return y + 1e-3 * previous

        return ShapedFunctionPlan(case, run)


class FortranBug(NumpyBackend):
    """Right for C-ordered inputs; a Fortran-ordered one is read as if its memory were in C order."""

    name = "fortran-bug"

    def plan_shaped(self, case):
        inner = super().plan_shaped(case)

        def run(x):
            x = np.asarray(x)
            if x.flags.f_contiguous and not x.flags.c_contiguous:
                x = np.ravel(x, order="K").reshape(x.shape)
            return inner.execute(x)

        return ShapedFunctionPlan(case, run)


class HalfDropped(NumpyBackend):
    """A real N-D inverse that inverts the halved (last) axis first, line by line, as if every
    line were a Hermitian half spectrum by itself, then the other axes, keeping the real part:
    the half of the Hermitian symmetry across the other axes is dropped."""

    name = "half-dropped"

    def plan_shaped(self, case):
        if case.kind != "irfftn":
            return super().plan_shaped(case)
        s, axes, norm = case.lengths, case.axes, case.norm

        def run(x):
            y = np.fft.irfft(x, n=s[-1], axis=axes[-1], norm=norm)
            return np.fft.ifftn(y, s=s[:-1], axes=axes[:-1], norm=norm).real

        return ShapedFunctionPlan(case, run)


class MissingScale(NumpyBackend):
    """An inverse N-D transform without its 1/N."""

    name = "missing-scale"

    def plan_shaped(self, case):
        inner = super().plan_shaped(case)
        if not case.is_inverse:
            return inner
        return ShapedFunctionPlan(case, lambda x: np.asarray(inner.execute(x)) * case.points)


class DropsRow(NumpyBackend):
    """An output one row short along the first axis (a wrong output shape)."""

    name = "drops-row"

    def plan_shaped(self, case):
        inner = super().plan_shaped(case)
        return ShapedFunctionPlan(case, lambda x: np.asarray(inner.execute(x))[:-1])


class Crashes(NumpyBackend):
    """Kills its own process when it transforms an array of more than 100 points."""

    name = "crashes"

    def plan_shaped(self, case):
        inner = super().plan_shaped(case)

        def run(x):
            if np.asarray(x).size > 100:
                os._exit(3)
            return inner.execute(x)

        return ShapedFunctionPlan(case, run)


class OneDOnly(NumpyBackend):
    """numpy's 1-D transforms only: it claims no batched or N-D kinds."""

    name = "one-d-only"

    def capabilities(self):
        return Capabilities(dtypes=("float32", "float64", "longdouble"))


class LowPrecision(NumpyBackend):
    """Computes double-precision N-D transforms in single precision, returning complex128."""

    name = "low-precision"

    def plan_shaped(self, case):
        inner = super().plan_shaped(case)
        if case.dtype != "float64" or case.is_real:
            return inner
        return ShapedFunctionPlan(case, lambda x: np.asarray(inner.execute(np.asarray(x).astype(np.complex64)))
                                  .astype(np.complex64).astype(np.complex128))


class ManyAxesOnly(NumpyBackend):
    """numpy's N-D kinds and 1-D transforms, but no batched one-axis kinds."""

    name = "many-axes-only"

    def capabilities(self):
        return Capabilities(dtypes=("float32", "float64", "longdouble"),
                            shaped_kinds=("fftn", "ifftn", "rfftn", "irfftn"))
