"""Planning and inputs of cases that are timed (``fftgauge time``, the gate), 1-D or shaped alike.

The timer and the gate's sampler call :func:`unsupported`, :func:`timing_input` and
:func:`plan_for`; for a 1-D case these are the backend's ``unsupported_reason`` (with its
declared convention), the battery's seeded input and ``plan`` (with the declared input
convention); for a :class:`~fftgauge.harness.shapes.case.ShapeCase` they are
``shaped_unsupported_reason``, a seeded array of the input shape and ``plan_shaped``, and the
plan is a :class:`LaidOutPlan`, whose ``prepare`` lays the input out as the case says
(:func:`~fftgauge.harness.shapes.case.lay_out`), outside every timed region.
"""

from __future__ import annotations

from typing import Any, Callable

import numpy as np

from fftgauge.harness.cases import Case
from fftgauge.harness.shapes.case import ShapeCase, lay_out

__all__ = ["LaidOutPlan", "plan_for", "shaped_input", "timing_input", "unsupported"]


class LaidOutPlan:
    """A shaped case's plan whose :meth:`prepare` returns the input in the case's layout
    (C, Fortran, strided view, negative strides), then through the wrapped plan's own
    ``prepare`` (which keeps the layout: :class:`~fftgauge.backends.base.ShapedFunctionPlan`).
    ``execute`` is the wrapped plan's own bound method (nothing added to what is timed); every
    other attribute is the wrapped plan's."""

    def __init__(self, plan: Any):
        self._plan = plan
        self.case = plan.case
        self.execute = plan.execute

    def prepare(self, x: np.ndarray) -> np.ndarray:
        """Return ``x`` laid out as the case's layout, prepared by the wrapped plan."""
        return self._plan.prepare(lay_out(np.asarray(x), self.case.layout))

    def __getattr__(self, name: str) -> Any:
        return getattr(self._plan, name)


def unsupported(backend: Any, case: Case | ShapeCase) -> str | None:
    """Return why ``backend`` does not take ``case`` (its claims, and for a 1-D case its declared
    convention's limits), or None."""
    if isinstance(case, ShapeCase):
        return backend.shaped_unsupported_reason(case)
    from fftgauge.harness.battery.conventions import backend_convention

    return backend.unsupported_reason(case) or backend_convention(backend).unsupported_reason(case)


def shaped_input(case: ShapeCase, seed: int, purpose: str = "time") -> np.ndarray:
    """Return a seeded standard-normal input of ``case.input_shape`` and ``case.input_dtype``
    (C order; real for ``rfft``/``rfftn``, independent real and imaginary parts otherwise).

    The generator is :func:`~fftgauge.harness.battery.inputs.case_rng` of the case's last 1-D
    transform with the case's label in the purpose, so every backend and process gets the same
    array for the same seed and case.
    """
    from fftgauge.harness.battery.inputs import case_rng

    rng = case_rng(seed, case.line_case(), f"{purpose} {case.label()}")
    size = int(np.prod(case.input_shape))
    if case.base_kind == "rfft":
        values = rng.standard_normal(size).astype(case.real_dtype)
    else:
        values = (rng.standard_normal(size) + 1j * rng.standard_normal(size)).astype(case.complex_dtype)
    return values.reshape(case.input_shape)


def timing_input(case: Case | ShapeCase, seed: int) -> np.ndarray:
    """Return the seeded input a timed case gets (purpose ``"time"``), 1-D or shaped."""
    if isinstance(case, ShapeCase):
        return shaped_input(case, seed)
    from fftgauge.harness.battery.inputs import case_rng, random_input

    return random_input(case, case_rng(seed, case, "time"))


def plan_for(backend: Any, case: Case | ShapeCase, clock: Callable[[], int]) -> tuple[Any, float]:
    """Return the plan of ``case`` and the seconds planning took on ``clock`` (nanoseconds).

    A 1-D plan prepares numpy-convention inputs in the convention the backend declared
    (:func:`~fftgauge.harness.battery.conventions.declared_input_plan`); a shaped plan is a
    :class:`LaidOutPlan`. Raises whatever the backend raises while planning.
    """
    start = clock()
    plan = backend.plan_shaped(case) if isinstance(case, ShapeCase) else backend.plan(case)
    plan_seconds = (clock() - start) * 1e-9
    if isinstance(case, ShapeCase):
        return LaidOutPlan(plan), plan_seconds
    from fftgauge.harness.battery.conventions import declared_input_plan

    return declared_input_plan(backend, plan), plan_seconds
