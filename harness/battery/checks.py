"""The battery's registry of checks and the job that runs them for one case.

:data:`CHECKS` lists the checks in the order they run (the names are user-visible, see the
contracts); the checks themselves live in :mod:`~fftgauge.harness.battery.value_checks`,
:mod:`~fftgauge.harness.battery.exact_checks` and
:mod:`~fftgauge.harness.battery.behaviour_checks`, each a function of a
:class:`~fftgauge.harness.battery.context.CheckContext`. :func:`run_case_checks` is the job
the engine runs in a worker process for one case: it plans once, runs the asked checks, and
turns anything that goes wrong into rows (an exception of one check never stops the others).

Sources: the DFT properties are Oppenheim & Schafer, Discrete-Time Signal Processing, 3rd
ed., Table 8.2 (from memory; the tests verify each numerically); linearity, impulse
response and time shift together are Ergün's test (Ergün, "Testing multivariate linear
functions: overcoming the generator bottleneck", Proc. 27th ACM STOC (1995) 407-416).
"""

from __future__ import annotations

from typing import Any, Callable, Mapping

import numpy as np

from fftgauge.backends.base import Backend, Capabilities, Conventions
from fftgauge.harness.battery.behaviour_checks import (
    check_concurrent, check_input_intact, check_nonfinite, check_precision, check_repeatable, check_shape,
    check_strided,
)
from fftgauge.harness.battery.context import CheckContext, OutputProblem
from fftgauge.harness.battery.context_base import asked_checks, guarded_check, rows_in_context
from fftgauge.harness.battery.conventions import DeclaredConvention
from fftgauge.harness.battery.exact_checks import check_convolution, check_pairs
from fftgauge.harness.battery.reference import reference_transform
from fftgauge.harness.battery.value_checks import (
    check_accuracy, check_impulse, check_linearity, check_modulation, check_parseval, check_round_trip,
    check_symmetry, check_time_shift,
)
from fftgauge.harness.cases import FIXED_DTYPES, Case
from fftgauge.harness.execution.crash import exception_text
from fftgauge.harness.rows import CheckRow, error_rows, skip_rows

__all__ = ["CHECKS", "CheckContext", "OutputProblem", "applicable_checks", "check_case", "inapplicable_reason",
           "run_case_checks", "run_check"]

CheckFn = Callable[[CheckContext], "list[CheckRow]"]

#: Every check, in the order the battery runs them. The names are user-visible (contracts).
CHECKS: dict[str, CheckFn] = {
    "accuracy": check_accuracy,
    "linearity": check_linearity,
    "impulse": check_impulse,
    "time-shift": check_time_shift,
    "parseval": check_parseval,
    "round-trip": check_round_trip,
    "symmetry": check_symmetry,
    "modulation": check_modulation,
    "convolution": check_convolution,
    "pairs": check_pairs,
    "input-intact": check_input_intact,
    "repeatable": check_repeatable,
    "concurrent": check_concurrent,
    "nonfinite": check_nonfinite,
    "strided": check_strided,
    "precision": check_precision,
    "shape": check_shape,
}


def inapplicable_reason(case: Case, capabilities: Capabilities | Mapping[str, Any] | None, name: str) -> str | None:
    """Return why check ``name`` says nothing about ``case``, or None when it applies.

    Only two checks need something the case may lack: ``time-shift`` and ``modulation``
    need n >= 2 (a length-1 signal has no non-trivial shift or frequency). ``round-trip``
    applies everywhere and reports a ``skip`` row itself when the backend lacks the inverse.
    """
    if name in ("time-shift", "modulation") and case.n < 2:
        return f"{name} needs n >= 2 (n = 1 has no non-trivial shift or frequency)"
    return None


def applicable_checks(case: Case, capabilities: Capabilities | Mapping[str, Any] | None = None) -> list[str]:
    """Return the names of the checks that apply to ``case``, in :data:`CHECKS` order.

    ``capabilities`` may be a :class:`~fftgauge.backends.base.Capabilities` or its ``as_dict()``.
    """
    return [name for name in CHECKS if inapplicable_reason(case, capabilities, name) is None]


def run_check(ctx: CheckContext, name: str) -> list[CheckRow]:
    """Run one check and return its rows; never raises.

    A backend that raises gives an ``error`` row with the exception in one line; an output of
    the wrong shape or not made of numbers gives a ``fail`` row (``shape``/``dtype``); a
    failure inside the check itself gives an ``error`` row that says so.
    """
    reason = inapplicable_reason(ctx.case, ctx.capabilities, name)
    if reason is not None:
        return skip_rows(ctx.label, ctx.case, [name], reason)
    return guarded_check(ctx, name, CHECKS[name])


def check_case(backend: Backend, case: Case, seed: int, check_names: list[str] | None = None,
               reference_fn: Callable[[np.ndarray, Case], Any] = reference_transform) -> list[CheckRow]:
    """Plan ``case`` once and return the rows of the asked checks (all of :data:`CHECKS` by default).

    A case the backend does not claim, or where its declared convention cannot be undone
    (``order=bit-reversed`` at a size that is not a power of two, ``packing=dc-nyquist`` at
    an odd one), gives ``skip`` rows; a plan that raises gives an ``error`` row for every
    asked check (the exception with the line that raised it).

    Raises
    ------
    UsageError
        For a check name not in :data:`CHECKS`.
    """
    names = asked_checks(check_names, CHECKS)

    if case.dtype in FIXED_DTYPES:  # q15/q31: the fixed-point checks (harness/fixed/checks.py)
        from fftgauge.harness.fixed.checks import fixed_check_case
        return fixed_check_case(backend, case, seed)
    reason = backend.unsupported_reason(case) or convention_reason(backend, case)
    if reason is not None:
        return skip_rows(backend.label, case, names, reason)
    try:
        plan = backend.plan(case)
    except Exception as exc:  # noqa: BLE001
        return error_rows(backend.label, case, names, f"planning failed: {exception_text(exc)}")
    return rows_in_context(CheckContext(backend, case, plan, seed, reference_fn=reference_fn), plan, names, run_check)


def convention_reason(backend: Backend, case: Case) -> str | None:
    """Return why ``backend``'s declared convention cannot be undone at ``case``, or None
    (:meth:`~fftgauge.harness.battery.conventions.DeclaredConvention.unsupported_reason`)."""
    declared = getattr(backend, "conventions", None)
    return DeclaredConvention(declared).unsupported_reason(case) if isinstance(declared, Conventions) else None


def run_case_checks(backend: Backend, case_fields: tuple, seed: int, check_names: list[str]) -> list[dict]:
    """Worker job: run the asked checks of one case and return their rows as dicts.

    Parameters
    ----------
    backend : the adapter (loaded in the worker from its SPEC).
    case_fields : ``(kind, dtype, n, norm)``.
    seed : the run's seed.
    check_names : names from :data:`CHECKS` (empty or None: all of them).

    Returns
    -------
    list of dict
        :meth:`CheckRow.as_dict` of every row, in the order asked.

    Raises
    ------
    UsageError
        For an unknown check name.
    """
    case = Case(*case_fields)
    return [row.as_dict() for row in check_case(backend, case, seed, check_names)]
