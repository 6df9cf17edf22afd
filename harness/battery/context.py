"""The check context: what every check of one case shares (the backend, the plan, the seed,
the ground truth, the accuracy limit), and the small measures the checks compare with.

:class:`CheckContext` draws the inputs (the same for every backend), runs the backend
(turning what it raises into :class:`~fftgauge.harness.errors.BackendFailure` with the line
that raised, and what it returns into a checked array; inputs and outputs pass through the
backend's declared convention, :mod:`~fftgauge.harness.battery.conventions`), plans the companion inverse once, makes rows and diagnoses
failures. The checks themselves live in :mod:`~fftgauge.harness.battery.value_checks`,
:mod:`~fftgauge.harness.battery.exact_checks` and :mod:`~fftgauge.harness.battery.behaviour_checks`.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Callable

import numpy as np

from fftgauge.backends.base import Backend, Plan
from fftgauge.harness.battery import bounds
from fftgauge.harness.battery import inputs
from fftgauge.harness.battery.context_base import (  # noqa: F401 - OutputProblem, one_line, copy_output re-exported
    ROUNDING_UNITS, ContextBase, OutputProblem, copy_output, execute_plan, one_line, require_numbers,
)
from fftgauge.harness.battery.conventions import ConventionMismatch, DeclaredConvention, backend_convention
from fftgauge.harness.battery.diagnosis import diagnose
from fftgauge.harness.battery.reference import reference_transform
from fftgauge.harness.cases import Case
from fftgauge.harness.dft import clean_half_spectrum, norm_factor
from fftgauge.harness.rows import CheckRow

#: The inverse of each kind (the round trip and convolution pair them).
COMPANION_KIND = {"fft": "ifft", "ifft": "fft", "rfft": "irfft", "irfft": "rfft"}
#: sqrt(2): the growth of a half spectrum's error norm when it is extended to a full one.
SQRT2 = float(np.sqrt(2.0))


def norm2(v: np.ndarray) -> float:
    """Return the 2-norm of ``v`` as a float, computed in ``v``'s own precision."""
    v = np.asarray(v)
    if v.size == 0:
        return 0.0
    return float(np.sqrt(np.sum(np.real(v) ** 2 + np.imag(v) ** 2)))


def ratio(num: float, den: float) -> float:
    """Return ``num / den``; 0 for 0/0 and ``inf`` for a non-zero over 0."""
    if den == 0.0:
        return 0.0 if num == 0.0 else float("inf")
    return num / den


def finite_or_none(v: float | None) -> float | None:
    """Return ``v`` when it is a finite number, else None (rows keep no NaN/Inf values)."""
    return v if v is None or np.isfinite(v) else None


def fmt_eps(value: float, dtype: str) -> str:
    """Return ``value`` in eps units of ``dtype`` as text (``"0.95 eps"``), or ``"not finite"``."""
    return f"{bounds.eps_units(value, dtype):.3g} eps" if np.isfinite(value) else "not finite"


@dataclass
class CheckContext(ContextBase):
    """Everything a check needs for one case of one backend.

    Attributes
    ----------
    backend : the adapter.
    case : the transform under test.
    plan : ``backend.plan(case)``, planned once and shared by the checks.
    seed : the run's seed; every input is drawn from :func:`fftgauge.harness.battery.inputs.case_rng`
        (seed, case, purpose), so all backends see the same inputs.
    reference_fn : ``reference_fn(x, case) -> Reference`` (the ground truth).
    limit : the relative 2-norm error limit of one transform (``accuracy_limit(case)``).
    """

    backend: Backend
    case: Case
    plan: Plan
    seed: int
    reference_fn: Callable[[np.ndarray, Case], Any] = reference_transform
    limit: float | None = None
    _plans: dict = field(default_factory=dict, repr=False)
    _diagnosis: tuple[str, str] | None = field(default=None, repr=False)
    _convention: DeclaredConvention | None = field(default=None, repr=False)

    def __post_init__(self) -> None:
        if self.limit is None:
            self.limit = bounds.accuracy_limit(self.case)
        self._convention = backend_convention(self.backend)

    # -- what the case is (label, capabilities, unit_roundoff, rounding, work_dtype: ContextBase)
    @property
    def convention(self) -> DeclaredConvention:
        """The conventions the backend declared (numpy's where it declared none)."""
        return self._convention

    @property
    def scale(self) -> Any:
        """The case's normalisation factor, in the work precision."""
        if self.work_dtype == np.dtype(np.clongdouble):
            return norm_factor(self.case.n, self.case.norm, self.case.is_inverse, np.longdouble, np.sqrt)
        return norm_factor(self.case.n, self.case.norm, self.case.is_inverse)

    # -- inputs ----------------------------------------------------------------------------------
    def rng(self, purpose: str) -> np.random.Generator:
        """Return the generator for ``purpose`` (backend independent)."""
        return inputs.case_rng(self.seed, self.case, purpose)

    def random_input(self, purpose: str, distribution: str = "gaussian", case: Case | None = None) -> np.ndarray:
        """Return a random input of ``case`` (default: this case) drawn for ``purpose``."""
        case = case or self.case
        x = inputs.random_input(case, inputs.case_rng(self.seed, case, purpose), distribution)
        return clean_half_spectrum(x, case.n) if case.kind == "irfft" else x

    def as_input(self, values: np.ndarray, case: Case | None = None) -> np.ndarray:
        """Return ``values`` rounded to the input dtype of ``case`` (real part only for a real input)."""
        case = case or self.case
        values = np.asarray(values)
        if case.input_dtype.kind == "f":
            values = np.real(values)
        x = np.ascontiguousarray(values.astype(case.input_dtype))
        return clean_half_spectrum(x, case.n) if case.kind == "irfft" else x

    # -- running the backend ---------------------------------------------------------------
    def run(self, x: np.ndarray, plan: Plan | None = None, copy_input: bool = True,
            case: Case | None = None) -> np.ndarray:
        """Return the backend's output for ``x`` through ``plan`` (default: the case's), both in
        numpy's convention: ``x`` is turned into the backend's declared convention first and
        its output back (:class:`~fftgauge.harness.battery.conventions.DeclaredConvention`).
        ``case`` is the plan's case (default: this one). See :meth:`run_native`.

        Raises
        ------
        BackendFailure
            When the backend raises.
        OutputProblem
            When it returns something that is not an array of numbers, or a packed half
            spectrum of the wrong length.
        """
        case = case or self.case
        return self.from_native(self.run_native(self.native_input(x, case), plan, copy_input), case)

    def run_native(self, x: np.ndarray, plan: Plan | None = None, copy_input: bool = True) -> np.ndarray:
        """Return :func:`~fftgauge.harness.battery.context_base.execute_plan` of ``x`` through
        ``plan`` (default: the case's), ``x`` and the output in the backend's own convention
        (raises what it raises). ``copy_input`` True passes a copy of ``x``, so a backend that
        writes to its input cannot spoil the check's own arrays."""
        return execute_plan(plan or self.plan, np.array(x, copy=True) if copy_input else x)

    def native_input(self, x: np.ndarray, case: Case | None = None) -> np.ndarray:
        """Return the input ``x`` (numpy's convention) of ``case`` (default: this one) as the
        backend takes it in its declared convention (``x`` itself when that changes nothing)."""
        return self.convention.to_backend(x, case or self.case)

    def from_native(self, y: np.ndarray, case: Case | None = None) -> np.ndarray:
        """Return the backend's output ``y`` of ``case`` (default: this one) in numpy's convention.

        Raises
        ------
        OutputProblem
            ``shape`` for a packed half spectrum of the wrong length.
        """
        try:
            return self.convention.from_backend(y, case or self.case)
        except ConventionMismatch as exc:
            raise OutputProblem("shape", str(exc)) from None

    def output(self, y: np.ndarray, case: Case | None = None) -> np.ndarray:
        """Return ``y`` as a work-precision complex array after checking its shape and kind.

        Raises
        ------
        OutputProblem
            ``shape`` for a wrong shape, ``dtype`` for an output that is not floating-point.
        """
        case = case or self.case
        require_numbers(y)
        if y.shape != (case.output_length,):
            raise OutputProblem("shape", f"output has shape {y.shape} where ({case.output_length},) is due")
        return y.astype(self.work_dtype)

    def transform(self, x: np.ndarray, plan: Plan | None = None, case: Case | None = None) -> np.ndarray:
        """Return the checked output of ``x`` (see :meth:`run` and :meth:`output`)."""
        return self.output(self.run(x, plan, case=case), case)

    def companion(self) -> tuple[Plan | None, Case, str | None]:
        """Return ``(plan, case, None)`` for the inverse kind of this case, or ``(None, case, reason)``.

        Raises
        ------
        BackendFailure
            When planning the companion raises.
        """
        case = Case(COMPANION_KIND[self.case.kind], self.case.dtype, self.case.n, self.case.norm)
        plan, reason = self.cached_plan(self._plans, case, self.backend.unsupported_reason, self.backend.plan,
                                        case.kind)
        return plan, case, reason

    # -- verdicts ----------------------------------------------------------------------------------
    def row(self, check: str, status: str, value: float | None = None, limit: float | None = None,
            diagnosis: str | None = None, message: str = "", eps: bool = True,
            reference: str | None = None) -> CheckRow:
        """Return one row of this case; ``eps_units`` from ``value`` when ``eps`` is True.

        When the backend declared a convention of its own for this kind, the message ends
        with it (``"[declared convention: sign=+1; checked in numpy's]"``), so a reader sees
        what every value was measured against.
        """
        value = finite_or_none(value)
        declared = self.convention.describe(self.case)
        if declared:
            message = f"{message} [declared convention: {declared}; checked in numpy's]".lstrip()
        eps_units = bounds.eps_units(value, self.case.dtype) if (eps and value is not None) else None
        return CheckRow(backend=self.label, kind=self.case.kind, dtype=self.case.dtype, n=self.case.n,
                        check=check, status=status, value=value, limit=limit, eps_units=eps_units,
                        diagnosis=diagnosis if status == "fail" else None, message=message,
                        norm=self.case.norm, reference=reference,
                        limit_source="bound" if limit is not None else None)

    def find_diagnosis(self, x: np.ndarray, y: np.ndarray) -> tuple[str, str]:
        """Return ``diagnose(case, x, y)`` for an output ``y`` in numpy's convention (see
        :meth:`ContextBase.diagnose`, which turns a diagnosis that fails into ``unknown``).

        When the backend declared a convention, what is found is what remains after undoing
        it (a ``scale`` names the declared factor and the one the backend applies; the row
        names the declared convention, see :meth:`row`).
        """
        return diagnose(self.case, x, y, self.reference_fn, self.limit,
                        declared_scale=self.convention.scale(self.case))

    def random_error(self, x: np.ndarray, y: np.ndarray) -> float:
        """Return the relative 2-norm error of the output ``y`` for the input ``x``.

        Raises
        ------
        ValueError
            For an output of the wrong shape.
        """
        return self.reference_fn(x, self.case).relative_error(y)


def phases(m: np.ndarray, n: int, work_dtype: np.dtype) -> np.ndarray:
    """Return ``exp(2j pi m / n)`` for integers ``m`` in the work precision (``m`` reduced mod n first)."""
    m = np.mod(np.asarray(m, dtype=np.int64), n)
    if work_dtype != np.dtype(np.clongdouble):
        return inputs.root_of_unity(m, n)
    angle = (np.arctan(np.longdouble(1)) * 8) * (m.astype(np.longdouble) / np.longdouble(n))
    return (np.cos(angle) + 1j * np.sin(angle)).astype(np.clongdouble)


def relative(diff: np.ndarray, scale: float) -> float:
    """Return ``norm2(diff) / scale`` (see :func:`ratio` for a zero scale)."""
    return ratio(norm2(diff), scale)
