"""The ``many`` calling shape of ``clib:`` backends: batched and N-D transforms with strides.

C prototype (T is ``double``, ``float`` or ``long double`` by the ``dtype`` option; the
``kind`` option says which family the one symbol serves, ``sign`` the direction)::

    int SYMBOL(int rank, const size_t *n, size_t howmany,
               const T *in, ptrdiff_t istride, ptrdiff_t idist,
               T *out, ptrdiff_t ostride, ptrdiff_t odist, int sign);

``howmany`` transforms of a ``rank``-D array of logical lengths ``n[0..rank-1]`` (row-major);
element ``(j_0, ..., j_{rank-1})`` of transform ``t`` is at
``base + t * dist + stride * (j_{rank-1} + L_{rank-1} * (j_{rank-2} + ...))`` counted in
elements of the array's own type (one complex value is one element), with ``L`` the array's
own lengths (``n[rank-1] / 2 + 1`` on the complex side of a real transform). Strides and
distances may be negative. ``kind=fft+ifft``: complex in and out, ``sign`` -1 forward, +1
inverse; ``kind=rfft+irfft``: ``sign`` -1 takes reals and writes the half spectrum, +1 the
reverse. Returns 0 on success.

How an array reaches the function (:class:`ManyPlan`): the transformed axes are passed as
``rank`` and ``n`` in the order the case lists them, the batch (every other axis) as
``howmany``/``dist``. When the input's transformed axes lie packed in that order (each
axis's stride is the next one's times its length: C order for trailing axes, a strided view,
negative strides) its own memory and strides are passed; otherwise (Fortran order over
several axes, permuted axes) the adapter makes one C-order copy first, inside the timed
call, and :attr:`ManyPlan.copies` counts it. A batch whose axes do not merge into one
distance is passed as one call per outer batch index (a Python loop). The output is written
into a fresh C-order array (the batch axes outside, the transformed axes inside in the listed
order) and returned as a view with the case's output shape.
"""

from __future__ import annotations

import ctypes
from typing import Any

import numpy as np

from fftgauge.backends.base import Plan
from fftgauge.harness.cases import Case
from fftgauge.harness.shapes.case import ShapeCase

__all__ = ["MANY_ARGTYPES", "ManyPlan", "packed_strides", "shape_of"]

#: The ctypes prototype of the many shape (rank, n, howmany, in, istride, idist, out, ostride, odist, sign).
MANY_ARGTYPES = (ctypes.c_int, ctypes.c_void_p, ctypes.c_size_t, ctypes.c_void_p, ctypes.c_ssize_t,
                 ctypes.c_ssize_t, ctypes.c_void_p, ctypes.c_ssize_t, ctypes.c_ssize_t, ctypes.c_int)


def shape_of(case: Case | ShapeCase) -> ShapeCase:
    """Return ``case`` as a shaped case: a 1-D case is the one-axis array ``(n,)``."""
    if isinstance(case, ShapeCase):
        return case
    return ShapeCase(case.kind, case.dtype, (case.n,), (0,), "C", case.norm)


def packed_strides(x: np.ndarray, axes: tuple[int, ...]) -> int | None:
    """Return the element stride of the innermost listed axis when ``x``'s listed axes lie packed
    in that order (``stride[a_k] == stride[a_{k+1}] * len[a_{k+1}]``), else None."""
    item = x.itemsize
    strides = [x.strides[a] for a in axes]
    if any(s % item for s in strides):
        return None
    for k in range(len(axes) - 1):
        if strides[k] != strides[k + 1] * x.shape[axes[k + 1]]:
            return None
    return strides[-1] // item


class ManyPlan(Plan):
    """Calls a many-shape function once per :meth:`execute` (once per outer batch index when the
    batch does not merge); see the module docstring."""

    def __init__(self, case: Case | ShapeCase, fn: Any, symbol: str, sign: int):
        super().__init__(case)  # type: ignore[arg-type]
        self._fn, self.symbol, self._sign = fn, symbol, sign
        self._shaped = shape_of(case)
        s = self._shaped
        self._axes = s.axes_normalised
        self._batch_axes = tuple(a for a in range(len(s.shape)) if a not in self._axes)
        self._n = (ctypes.c_size_t * len(s.lengths))(*s.lengths)
        #: How many executions had to copy the input into C order first (transformed axes not packed).
        self.copies = 0

    def prepare(self, x: np.ndarray) -> np.ndarray:
        """Return ``x`` with the case's input dtype, keeping its layout (strides reach the C code)."""
        dtype = self._shaped.input_dtype
        x = np.asarray(x)
        return x if x.dtype == dtype else x.astype(dtype, order="K")

    def execute(self, x: np.ndarray) -> np.ndarray:
        """Transform ``x`` (any layout); return the output. Raises :class:`BackendFailure` on a non-zero code."""
        s = self._shaped
        x = np.asarray(x, dtype=s.input_dtype)
        one_d = not isinstance(self.case, ShapeCase)
        if one_d:
            x = x.reshape(s.input_shape)
        if x.shape != s.input_shape:
            raise ValueError(f"{self.case.label()} takes an array of shape {s.input_shape}, got {x.shape}")
        order = self._batch_axes + self._axes
        istride = packed_strides(x, self._axes)
        if istride is None:  # the transformed axes do not lie packed: one C-order copy
            x = np.ascontiguousarray(np.transpose(x, order)).transpose(np.argsort(order))
            istride = packed_strides(x, self._axes)
            self.copies += 1
        out_shape = s.output_shape
        arranged = np.empty([out_shape[a] for a in order], dtype=s.output_dtype)
        out = arranged.transpose(np.argsort(order))
        self._call_batches(x, istride, out)
        return out.reshape(-1) if one_d else out

    def _call_batches(self, x: np.ndarray, istride: int, out: np.ndarray) -> None:
        """Call the function over the batch: one call when the batch axes merge, else one per outer index."""
        batch = self._batch_axes
        rank = len(self._axes)
        if not batch:
            return self._call(rank, 1, x.ctypes.data, istride, 0, out.ctypes.data, 0)
        merged = all(x.strides[batch[i]] == x.strides[batch[i + 1]] * x.shape[batch[i + 1]]
                     for i in range(len(batch) - 1)) and x.strides[batch[-1]] % x.itemsize == 0
        inner = batch[-1]
        odist = out.strides[inner] // out.itemsize  # the output's transformed axes are packed: stride 1
        if merged:
            count = int(np.prod([x.shape[b] for b in batch]))
            return self._call(rank, count, x.ctypes.data, istride, x.strides[inner] // x.itemsize,
                              out.ctypes.data, odist)
        for index in np.ndindex(*[x.shape[b] for b in batch[:-1]]):
            at_in = x.ctypes.data + sum(i * x.strides[b] for i, b in zip(index, batch))
            at_out = out.ctypes.data + sum(i * out.strides[b] for i, b in zip(index, batch))
            self._call(rank, x.shape[inner], at_in, istride, x.strides[inner] // x.itemsize, at_out, odist)

    def _call(self, rank: int, howmany: int, at_in: int, istride: int, idist: int, at_out: int, odist: int) -> None:
        rc = self._fn(rank, ctypes.addressof(self._n), howmany, at_in, istride, idist, at_out, 1, odist, self._sign)
        if rc != 0:
            from fftgauge.backends.shared_library import ForeignCallError

            raise ForeignCallError(f"{self.symbol} returned error code {rc} for {self.case.label()}")

