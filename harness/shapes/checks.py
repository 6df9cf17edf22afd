"""The shaped battery's registry of checks and the function that runs them for one case.

:data:`SHAPED_CHECKS` lists the checks of a shaped case in the order they run (the names are
user-visible: the 1-D battery's where the check means the same, new ones for what exists only
for arrays); they live in :mod:`~fftgauge.harness.shapes.value_checks` and
:mod:`~fftgauge.harness.shapes.structure_checks`. :func:`check_shaped_case` plans once, runs
the asked checks and turns anything that goes wrong into rows, as
:func:`fftgauge.harness.battery.checks.check_case` does for 1-D cases.
"""

from __future__ import annotations

from typing import Any, Callable

import numpy as np

from fftgauge.backends.base import Backend
from fftgauge.harness.battery.context_base import asked_checks, guarded_check, rows_in_context
from fftgauge.harness.execution.crash import exception_text
from fftgauge.harness.rows import CheckRow
from fftgauge.harness.shapes.case import ShapeCase
from fftgauge.harness.shapes.context import ShapedContext, shaped_row
from fftgauge.harness.shapes import structure_checks as sc
from fftgauge.harness.shapes import value_checks as vc

__all__ = ["SHAPED_CHECKS", "check_shaped_case", "run_shaped_check", "shaped_case_rows"]

#: Every check of a shaped case, in the order the battery runs them (user-visible names).
SHAPED_CHECKS: dict[str, Callable[[ShapedContext], "list[CheckRow]"]] = {
    "accuracy": vc.check_accuracy,
    "linearity": vc.check_linearity,
    "impulse": vc.check_impulse,
    "time-shift": vc.check_time_shift,
    "parseval": vc.check_parseval,
    "round-trip": vc.check_round_trip,
    "symmetry": vc.check_symmetry,
    "convolution": vc.check_convolution,
    "pairs": vc.check_pairs,
    "separability": sc.check_separability,
    "axis-handling": sc.check_axis_handling,
    "batch-independence": sc.check_batch_independence,
    "layout": sc.check_layout,
    "input-intact": sc.check_input_intact,
    "shape": sc.check_shape,
}


def run_shaped_check(ctx: ShapedContext, name: str) -> list[CheckRow]:
    """Run one check and return its rows; never raises (as the 1-D battery's ``run_check``):
    a backend that raises gives an ``error`` row, an unusable output a ``fail`` row with its
    code, a failure of the check itself an ``error`` row that says so."""
    return guarded_check(ctx, name, SHAPED_CHECKS[name])


def shaped_case_rows(label: str, case: ShapeCase, names: list[str], status: str, message: str) -> list[CheckRow]:
    """Return one ``skip`` or ``error`` row per check name for the shaped ``case``."""
    return [shaped_row(label, case, name, status, message=message) for name in names]


def check_shaped_case(backend: Backend, case: ShapeCase, seed: int, check_names: list[str] | None = None,
                      reference_fn: Callable[[np.ndarray, ShapeCase], Any] | None = None,
                      limit_fn: Callable[[ShapeCase], float] | None = None) -> list[CheckRow]:
    """Plan the shaped ``case`` once and return the rows of the asked checks (all by default).

    A case the backend does not claim gives ``skip`` rows with its reason; a plan that raises
    an ``error`` row per check.

    Raises
    ------
    UsageError
        For a check name not in :data:`SHAPED_CHECKS`.
    """
    names = asked_checks(check_names, SHAPED_CHECKS, " for shaped cases")
    reason = backend.shaped_unsupported_reason(case)
    if reason is not None:
        return shaped_case_rows(backend.label, case, names, "skip", reason)
    try:
        plan = backend.plan_shaped(case)
    except Exception as exc:  # noqa: BLE001
        return shaped_case_rows(backend.label, case, names, "error", f"planning failed: {exception_text(exc)}")
    ctx = ShapedContext(backend, case, plan, seed, reference_fn=reference_fn, limit_fn=limit_fn)
    return rows_in_context(ctx, plan, names, run_shaped_check)
