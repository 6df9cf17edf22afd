"""A shaped transform made of a backend's own 1-D plans, applied axis by axis, line by line.

The reference backends (the direct DFT, the pure-Python radix-2 FFTs) transform one 1-D
array; :class:`AxisPassPlan` turns them into batched and N-D transforms by separability:
one 1-D plan per transformed axis (``case.line_case(i)``), run on every line along that
axis. The real kinds follow numpy: ``rfftn`` runs the real transform along the last listed
axis first, then the complex ones; ``irfftn`` the complex inverses first, the real inverse
along the last listed axis at the end. Each pass rounds to the case's precision, as a
separable implementation in that precision does. A Python loop over lines: for small shapes
(the backends set ``max_shaped_points``).
"""

from __future__ import annotations

import numpy as np

from fftgauge.backends.base import Backend, Plan
from fftgauge.harness.shapes.case import ShapeCase

__all__ = ["AxisPassPlan", "plan_axis_passes"]


class AxisPassPlan(Plan):
    """The shaped case as successive 1-D passes, each a 1-D plan of the backend."""

    def __init__(self, case: ShapeCase, passes: list[tuple[int, Plan]]):
        super().__init__(case)  # type: ignore[arg-type]
        self._passes = passes

    def prepare(self, x: np.ndarray) -> np.ndarray:
        """Return ``x`` itself when it has the case's input dtype, else a cast keeping its layout."""
        return x if x.dtype == self.case.input_dtype else x.astype(self.case.input_dtype, order="K")

    def execute(self, x: np.ndarray) -> np.ndarray:
        """Return the transform of ``x``: every pass's 1-D plan on every line along its axis (a fresh array)."""
        y = x
        for axis, plan in self._passes:
            y = _along(y, axis, plan)
        return y

    def close(self) -> None:
        """Close the 1-D plans."""
        for _, plan in self._passes:
            plan.close()


def _along(y: np.ndarray, axis: int, plan: Plan) -> np.ndarray:
    """Return the array of ``plan``'s 1-D output for every line of ``y`` along ``axis``."""
    line = plan.case
    moved = np.moveaxis(y, axis, -1)
    out = np.empty(moved.shape[:-1] + (line.output_length,), dtype=line.output_dtype)
    for index in np.ndindex(moved.shape[:-1]):
        vector = np.array(moved[index], dtype=line.input_dtype)
        out[index] = plan.execute(plan.prepare(vector))
    return np.moveaxis(out, -1, axis)


def plan_axis_passes(backend: Backend, case: ShapeCase) -> AxisPassPlan:
    """Return an :class:`AxisPassPlan` of ``case`` from ``backend.plan`` of each axis's 1-D case.

    The passes run in the order numpy's real kinds need (see the module docstring); the
    complex kinds take the axes as listed.
    """
    axes = case.axes_normalised
    positions = list(range(len(axes)))
    if case.base_kind == "rfft":
        positions = [positions[-1], *positions[:-1]]
    passes = [(axes[i], backend.plan(case.line_case(i))) for i in positions]
    return AxisPassPlan(case, passes)
