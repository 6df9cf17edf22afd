"""The shaped case: one transform of a whole array, batched along one axis or over several.

A :class:`ShapeCase` is the N-D sibling of :class:`fftgauge.harness.cases.Case`. Its kinds are
the array API standard's names: ``fft``/``ifft``/``rfft``/``irfft`` along exactly one axis of
an array (every other axis is a batch), and ``fftn``/``ifftn``/``rfftn``/``irfftn`` over two
or more axes. ``shape`` is always the shape of the logical signal, so for ``irfft``/``irfftn``
it is the shape of the real output, and the input's last transformed axis holds
``n // 2 + 1`` complex values (numpy and the array API standard: the real kinds halve the
*last* axis listed in ``axes``).

``layout`` says how the input array lies in memory when it reaches the backend:

- ``C``: C-contiguous (row-major);
- ``F``: Fortran-contiguous (column-major);
- ``strided``: a non-contiguous view, every second element along each axis of a buffer twice
  as long in each dimension;
- ``reversed``: a view with a negative stride along every axis (``x[::-1, ::-1]`` of a
  C array holding the values in reverse order).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from fftgauge.harness.cases import DTYPES, NORMS, Case

__all__ = ["LAYOUTS", "ONE_AXIS_KINDS", "MANY_AXIS_KINDS", "SHAPE_KINDS", "ShapeCase", "family_kind",
           "lay_out"]

ONE_AXIS_KINDS = ("fft", "ifft", "rfft", "irfft")
MANY_AXIS_KINDS = ("fftn", "ifftn", "rfftn", "irfftn")
SHAPE_KINDS = ONE_AXIS_KINDS + MANY_AXIS_KINDS
LAYOUTS = ("C", "F", "strided", "reversed")

_TO_MANY = dict(zip(ONE_AXIS_KINDS, MANY_AXIS_KINDS))
_TO_ONE = dict(zip(MANY_AXIS_KINDS, ONE_AXIS_KINDS))


def family_kind(kind: str, axis_count: int) -> str:
    """Return the kind of ``kind``'s family for a transform over ``axis_count`` axes.

    ``fft`` and ``fftn`` are one family (complex forward), and so on: one axis gives the 1-D
    name, several give the ``n`` name. Raises ``ValueError`` for an unknown kind.
    """
    if kind in _TO_MANY:
        return kind if axis_count == 1 else _TO_MANY[kind]
    if kind in _TO_ONE:
        return _TO_ONE[kind] if axis_count == 1 else kind
    raise ValueError(f"unknown transform kind {kind!r}; expected one of {', '.join(SHAPE_KINDS)}")


@dataclass(frozen=True)
class ShapeCase:
    """One shaped transform: ``kind`` of an array of ``shape`` over ``axes``, in ``layout``.

    ``axes`` are as given (negative values allowed, order kept: a permuted order is a case of
    its own); :attr:`axes_normalised` gives them as non-negative indices.
    """

    kind: str
    dtype: str
    shape: tuple[int, ...]
    axes: tuple[int, ...]
    layout: str = "C"
    norm: str = "backward"

    def __post_init__(self) -> None:
        if self.kind not in SHAPE_KINDS:
            raise ValueError(f"unknown transform kind {self.kind!r}; expected one of {', '.join(SHAPE_KINDS)}")
        if self.dtype not in DTYPES:
            raise ValueError(f"unknown precision {self.dtype!r}; expected one of {', '.join(DTYPES)}")
        if self.norm not in NORMS:
            raise ValueError(f"unknown normalisation {self.norm!r}; expected one of {', '.join(NORMS)}")
        if self.layout not in LAYOUTS:
            raise ValueError(f"unknown layout {self.layout!r}; expected one of {', '.join(LAYOUTS)}")
        if not self.shape or any(not isinstance(n, (int, np.integer)) or n < 1 for n in self.shape):
            raise ValueError(f"every length of a shape must be a positive integer, got {self.shape!r}")
        if not self.axes:
            raise ValueError("a shaped case transforms at least one axis")
        rank = len(self.shape)
        if any(not -rank <= a < rank for a in self.axes):
            raise ValueError(f"axes {self.axes!r} out of range for a {rank}-D shape {self.shape!r}")
        if len(set(self.axes_normalised)) != len(self.axes):
            raise ValueError(f"axes {self.axes!r} repeat an axis")
        if self.kind in ONE_AXIS_KINDS and len(self.axes) != 1:
            raise ValueError(f"{self.kind} transforms one axis; use {_TO_MANY[self.kind]} for axes {self.axes!r}")
        if self.kind in MANY_AXIS_KINDS and len(self.axes) < 2:
            raise ValueError(f"{self.kind} transforms two or more axes; use {_TO_ONE[self.kind]} for one axis")

    # -- what the transform is ------------------------------------------------------------
    @property
    def axes_normalised(self) -> tuple[int, ...]:
        """The axes as non-negative indices, in the given order."""
        return tuple(a % len(self.shape) for a in self.axes)

    @property
    def base_kind(self) -> str:
        """The 1-D kind of this case's family (``fft`` for ``fftn``)."""
        return family_kind(self.kind, 1)

    @property
    def is_real(self) -> bool:
        """True for the real-signal kinds."""
        return self.base_kind in ("rfft", "irfft")

    @property
    def is_inverse(self) -> bool:
        """True for the inverse kinds (positive exponent sign)."""
        return self.base_kind in ("ifft", "irfft")

    @property
    def lengths(self) -> tuple[int, ...]:
        """The logical lengths of the transformed axes, in ``axes`` order."""
        return tuple(self.shape[a] for a in self.axes_normalised)

    @property
    def points(self) -> int:
        """N: the product of the transformed lengths (the size of one transform)."""
        return math.prod(self.lengths)

    @property
    def batch(self) -> int:
        """How many transforms one call computes: the product of the untransformed lengths."""
        return math.prod(self.shape) // self.points

    @property
    def halved_axis(self) -> int | None:
        """The (non-negative) axis a real kind halves: the last of ``axes``; None for complex kinds."""
        return self.axes_normalised[-1] if self.is_real else None

    def _halved(self) -> tuple[int, ...]:
        shape = list(self.shape)
        shape[self.axes_normalised[-1]] = shape[self.axes_normalised[-1]] // 2 + 1
        return tuple(shape)

    @property
    def input_shape(self) -> tuple[int, ...]:
        """Shape of the input array (the halved last axis for the real inverse kinds)."""
        return self._halved() if self.base_kind == "irfft" else self.shape

    @property
    def output_shape(self) -> tuple[int, ...]:
        """Shape the output must have (the halved last axis for the real forward kinds)."""
        return self._halved() if self.base_kind == "rfft" else self.shape

    @property
    def real_dtype(self) -> np.dtype:
        """The numpy real dtype of this case's precision."""
        return self.line_case().real_dtype

    @property
    def complex_dtype(self) -> np.dtype:
        """The numpy complex dtype of this case's precision."""
        return self.line_case().complex_dtype

    @property
    def input_dtype(self) -> np.dtype:
        """Dtype of the input array: real for the real forward kinds, complex otherwise."""
        return self.real_dtype if self.base_kind == "rfft" else self.complex_dtype

    @property
    def output_dtype(self) -> np.dtype:
        """Dtype the output should have: real for the real inverse kinds, complex otherwise."""
        return self.real_dtype if self.base_kind == "irfft" else self.complex_dtype

    def line_case(self, axis_index: int = -1) -> Case:
        """Return the 1-D :class:`Case` of the transform along ``axes[axis_index]``.

        Its kind is the family's 1-D kind for the halved (last) axis and the complex kind of
        the same direction for the others, as in a separable evaluation.
        """
        position = axis_index % len(self.axes)
        n = self.lengths[position]
        kind = self.base_kind
        if self.is_real and position != len(self.axes) - 1:
            kind = "ifft" if self.is_inverse else "fft"
        return Case(kind, self.dtype, n, self.norm)

    def label(self) -> str:
        """Short human label, e.g. ``"rfftn float64 12x12x12 axes=0,1,2 C"``."""
        shape = "x".join(str(n) for n in self.shape)
        axes = ",".join(str(a) for a in self.axes)
        norm = "" if self.norm == "backward" else f" norm={self.norm}"
        return f"{self.kind} {self.dtype} {shape} axes={axes} {self.layout}{norm}"

    def input_bytes(self) -> int:
        """Bytes of one input array of this case."""
        return math.prod(self.input_shape) * self.input_dtype.itemsize

    def output_bytes(self) -> int:
        """Bytes of one output array of this case."""
        return math.prod(self.output_shape) * self.output_dtype.itemsize


def lay_out(x: np.ndarray, layout: str) -> np.ndarray:
    """Return an array equal to ``x`` (same shape, dtype, values) lying in memory as ``layout``.

    ``C`` and ``F`` are contiguous copies; ``strided`` is a view of every second element of a
    buffer twice as long along each axis; ``reversed`` a view with negative strides on every
    axis. Raises ``ValueError`` for an unknown layout.
    """
    if layout == "C":
        return np.ascontiguousarray(x)
    if layout == "F":
        return np.asfortranarray(x)
    if layout == "strided":
        buffer = np.zeros(tuple(2 * n for n in x.shape), dtype=x.dtype)
        view = buffer[tuple(slice(None, None, 2) for _ in x.shape)]
        view[...] = x
        return view
    if layout == "reversed":
        flip = tuple(slice(None, None, -1) for _ in x.shape)
        return np.ascontiguousarray(x[flip])[flip]
    raise ValueError(f"unknown layout {layout!r}; expected one of {', '.join(LAYOUTS)}")
