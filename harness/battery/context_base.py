"""What the 1-D and the shaped check contexts share, and how a check runs inside one.

:class:`ContextBase` is the common part of
:class:`fftgauge.harness.battery.context.CheckContext` and
:class:`fftgauge.harness.shapes.context.ShapedContext`: the case's precision and rounding
allowance, running a plan (a backend that raises becomes
:class:`~fftgauge.harness.errors.BackendFailure`, what it returns a checked copy), planning
derived cases once and closing them, and the verdicts (pass, or fail with the diagnosis of a
random input first). :func:`guarded_check` runs one check so that nothing it raises stops the
others, and :func:`rows_in_context` runs the asked checks of one planned case and closes
what they planned.
"""

from __future__ import annotations

import functools
import warnings
from typing import Any, Callable

import numpy as np

from fftgauge.backends.base import Capabilities, Plan
from fftgauge.harness.battery import bounds
from fftgauge.harness.errors import BackendFailure, UsageError
from fftgauge.harness.execution.crash import exception_text
from fftgauge.harness.rows import CheckRow

#: Unit roundoffs (of the case's precision) added to every tolerance for forming the
#: combinations a check compares and rounding its new inputs to the case's precision.
ROUNDING_UNITS = 8


class OutputProblem(Exception):
    """An output a value check cannot compare (wrong shape, not numbers); carries a diagnosis code."""

    def __init__(self, code: str, message: str):
        super().__init__(message)
        self.code = code
        self.message = message


def one_line(text: Any) -> str:
    """Return ``str(text)`` with every run of whitespace made one space (a message fits one line)."""
    return " ".join(str(text).split())


def copy_output(out: Any) -> np.ndarray:
    """Return a copy of a backend's output as an ndarray.

    Raises
    ------
    OutputProblem
        ``dtype`` for None, something numpy cannot make an array of, or an array of Python objects.
    """
    if out is None:
        raise OutputProblem("dtype", "the backend returned None, not an array")
    try:
        y = np.array(out, copy=True)
    except Exception:  # noqa: BLE001
        raise OutputProblem("dtype", f"the backend returned a {type(out).__name__}, not an array") from None
    if y.dtype == object:
        raise OutputProblem("dtype", f"the backend returned a {type(out).__name__} of Python objects, not numbers")
    return y


def execute_plan(plan: Plan, arg: np.ndarray) -> np.ndarray:
    """Return a copy of ``plan.execute(arg)`` as an ndarray (plans may reuse output buffers).

    Raises
    ------
    BackendFailure
        When the backend raises (its message names the line, as a crash does).
    OutputProblem
        When it returns something that is not an array of numbers.
    """
    try:
        with np.errstate(all="ignore"):
            out = plan.execute(arg)
    except Exception as exc:  # noqa: BLE001 - any exception of the backend is an error row
        raise BackendFailure(f"the backend raised {exception_text(exc)}") from None
    return copy_output(out)


def require_numbers(y: np.ndarray) -> None:
    """Raise :class:`OutputProblem` (``dtype``) when the output ``y`` is not floating-point or complex."""
    if y.dtype.kind not in "fc":
        raise OutputProblem("dtype", f"output has dtype {y.dtype}, not a floating-point or complex type")


def close_plans(plans: dict) -> None:
    """Close every plan of ``plans`` (values ``(plan or None, reason)``) and empty it; closing never raises."""
    for plan, _ in plans.values():
        if plan is not None:
            try:
                plan.close()
            except Exception:  # noqa: BLE001 - closing must not raise into the battery
                pass
    plans.clear()


class ContextBase:
    """The methods both check contexts share. A subclass (a dataclass) holds ``backend``,
    ``case`` (with ``dtype``), ``plan``, ``limit``, ``_diagnosis`` and ``_plans`` (the plans it
    made, closed by :meth:`close`), and defines
    ``random_input(purpose)``, ``run(x)``, ``random_error(x, y)`` (the relative error of an
    output for a random input), ``find_diagnosis(x, y)`` and ``row(...)``."""

    backend: Any
    case: Any
    limit: float | None
    _diagnosis: tuple[str, str] | None
    _plans: dict

    # -- what the case is --------------------------------------------------------------------
    @property
    def label(self) -> str:
        """The backend's label as rows show it."""
        return self.backend.label

    @functools.cached_property
    def capabilities(self) -> Capabilities:
        """The backend's claims, asked once per context (every check of the case asks; building
        and validating a :class:`~fftgauge.backends.base.Capabilities` costs tens of microseconds)."""
        return self.backend.capabilities()

    @property
    def unit_roundoff(self) -> float:
        """u of the case's precision."""
        return bounds.unit_roundoff(self.case.dtype)

    @property
    def rounding(self) -> float:
        """The rounding allowance every tolerance carries: ``ROUNDING_UNITS`` u."""
        return ROUNDING_UNITS * self.unit_roundoff

    @property
    def work_dtype(self) -> np.dtype:
        """The complex dtype comparisons are made in: complex128, or clongdouble for long double cases."""
        return np.dtype(np.clongdouble if self.case.dtype == "longdouble" else np.complex128)

    # -- derived plans ---------------------------------------------------------------------------
    def cached_plan(self, plans: dict, key: Any, unsupported: Callable[[Any], str | None],
                    make: Callable[[Any], Plan], what: str) -> tuple[Plan | None, str | None]:
        """Return ``(plan, None)`` for the case ``key`` planned once by ``make`` (kept in
        ``plans``), or ``(None, reason)`` when ``unsupported(key)`` gives a reason.

        Raises
        ------
        BackendFailure
            ``"planning {what} raised ..."`` when planning raises.
        """
        if key not in plans:
            reason = unsupported(key)
            if reason is not None:
                plans[key] = (None, reason)
            else:
                try:
                    plans[key] = (make(key), None)
                except Exception as exc:  # noqa: BLE001
                    raise BackendFailure(f"planning {what} raised {exception_text(exc)}") from None
        return plans[key]

    def close(self) -> None:
        """Close the plans this context made (companions, derived cases; the main plan is the caller's)."""
        close_plans(self._plans)

    # -- verdicts --------------------------------------------------------------------------------
    def diagnose(self, x: np.ndarray, y: np.ndarray) -> tuple[str, str]:
        """Return ``find_diagnosis(x, y)`` for the output ``y`` of ``x``; a diagnosis that itself
        fails gives ``unknown``."""
        try:
            return self.find_diagnosis(x, y)
        except Exception as exc:  # noqa: BLE001
            return "unknown", f"no diagnosis ({type(exc).__name__}: {one_line(exc)})"

    def random_diagnosis(self) -> tuple[str, str] | None:
        """Return the diagnosis of the backend's output for a random Gaussian input, or None
        when that output is within the accuracy limit (computed once per context)."""
        if self._diagnosis is None:
            xr = self.random_input("diagnosis")
            try:
                yr = self.run(xr)
            except (BackendFailure, OutputProblem) as exc:
                self._diagnosis = ("unknown", f"the backend gives no usable output for a random input ({exc})")
            else:
                try:
                    err = self.random_error(xr, yr)
                except ValueError:  # wrong shape
                    err = float("inf")
                self._diagnosis = ("", "") if np.isfinite(err) and err <= self.limit else self.diagnose(xr, yr)
        return self._diagnosis if self._diagnosis[0] else None

    def diagnose_failure(self, x: np.ndarray | None = None, y: np.ndarray | None = None) -> tuple[str, str]:
        """Return the diagnosis of a failed value check.

        The hypotheses are told apart best on a generic input (on an impulse, say, a shift of
        the output and a constant phase factor look the same), so the backend's output for a
        random Gaussian input is diagnosed first; only when that output is accurate is the
        check's own ``(x, y)`` diagnosed, and the message says the failure is specific to it.
        """
        found = self.random_diagnosis()
        if found is not None:
            return found
        if x is None:
            return "unknown", "a random input is transformed accurately"
        code, why = self.diagnose(x, y)
        return code, f"a random input is transformed accurately, so this is specific to the check's input: {why}"

    def verdict(self, check: str, value: float, limit: float, message: str, x: np.ndarray | None = None,
                y: np.ndarray | None = None, reference: str | None = None) -> CheckRow:
        """Return a pass row when ``value <= limit``, else a fail row diagnosed from ``(x, y)``."""
        if np.isfinite(value) and value <= limit:
            return self.row(check, "pass", value, limit, message=message, reference=reference)
        code, why = self.diagnose_failure(x, y)
        return self.row(check, "fail", value, limit, diagnosis=code,
                        message=f"{message}; {why}" if why else message, reference=reference)


def asked_checks(check_names: list[str] | None, registry: dict[str, Any], scope: str = "") -> list[str]:
    """Return the asked check names (every one of ``registry`` when none are asked).

    Raises
    ------
    UsageError
        For a name not in ``registry`` (``scope`` follows the name in the message, e.g.
        ``" for shaped cases"``).
    """
    names = list(check_names) if check_names else list(registry)
    unknown = [c for c in names if c not in registry]
    if unknown:
        raise UsageError(f"unknown check {unknown[0]!r}{scope}; checks: {', '.join(registry)}")
    return names


def guarded_check(ctx: Any, name: str, check: Callable[[Any], "list[CheckRow]"]) -> list[CheckRow]:
    """Run ``check(ctx)`` and return its rows; never raises.

    A backend that raises gives an ``error`` row with the exception in one line; an output of
    the wrong shape or not made of numbers gives a ``fail`` row with its code; a failure
    inside the check itself gives an ``error`` row that says so.
    """
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            warnings.simplefilter("ignore", np.exceptions.ComplexWarning)
            return check(ctx)
    except OutputProblem as problem:
        return [ctx.row(name, "fail", diagnosis=problem.code, eps=False, message=problem.message)]
    except BackendFailure as exc:
        return [ctx.row(name, "error", eps=False, message=one_line(exc))]
    except Exception as exc:  # noqa: BLE001 - one check's failure must not stop the others
        return [ctx.row(name, "error", eps=False, message=f"the {name} check could not run: {exception_text(exc)}")]


def rows_in_context(ctx: Any, plan: Plan, names: list[str],
                    run_one: Callable[[Any, str], "list[CheckRow]"]) -> list[CheckRow]:
    """Return the rows of ``run_one(ctx, name)`` for every name, in order; then close the
    context's own plans and ``plan`` (closing never raises)."""
    try:
        return [row for name in names for row in run_one(ctx, name)]
    finally:
        ctx.close()
        try:
            plan.close()
        except Exception:  # noqa: BLE001
            pass
