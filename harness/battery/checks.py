"""The checks of the correctness battery: each one a small function of a :class:`CheckContext`
that returns :class:`~fftgauge.harness.rows.CheckRow` rows.

:data:`CHECKS` lists them in the order they run (the names are user-visible, see the
contracts). :func:`run_case_checks` is the job the engine runs in a worker process for one
case: it plans once, runs the asked checks, and turns anything that goes wrong into rows
(an exception of one check never stops the others).

How the tolerances are derived
------------------------------
Every computed transform is trusted to be within ``limit = accuracy_limit(case)`` of the
exact one, relative to its own 2-norm (:mod:`fftgauge.harness.battery.bounds`). A check that compares
combinations of several computed transforms measures the difference *relative to the sum
of the norms of the computed transforms it is built from*, each weighted by its coefficient
(``S = norm F(z) + |a| norm F(x) + |b| norm F(y)`` for linearity). Errors add: the
difference is then at most ``limit`` in these units, plus the rounding of forming the
combinations and of rounding new inputs to the case's precision, which
:data:`ROUNDING_UNITS` unit roundoffs cover. Where a half spectrum is extended to a full one
(``rfft``, ``irfft``) its error can grow by sqrt(2) (the extended error has at most twice the
energy), so those terms are weighted by sqrt(2). Each check's docstring states its own sum.

Sources: the DFT properties are Oppenheim & Schafer, Discrete-Time Signal Processing, 3rd
ed., Table 8.2 (from memory; the tests verify each numerically); linearity, impulse
response and time shift together are Ergün's test (Ergün, "Testing multivariate linear
functions: overcoming the generator bottleneck", Proc. 27th ACM STOC (1995) 407-416).
"""

from __future__ import annotations

import os
import queue
import threading
import time
import warnings
from dataclasses import dataclass, field
from typing import Any, Callable, Mapping

import numpy as np

from fftgauge.backends.base import Backend, Capabilities, Plan
from fftgauge.harness.battery import bounds
from fftgauge.harness.battery import inputs
from fftgauge.harness.cases import Case, norm_factor
from fftgauge.harness.battery.diagnosis import diagnose, diagnose_round_trip
from fftgauge.harness.errors import BackendFailure, UsageError
from fftgauge.harness.battery.reference import reference_transform
from fftgauge.harness.rows import CheckRow

#: Unit roundoffs (of the case's precision) added to every tolerance for forming the
#: combinations a check compares and rounding its new inputs to the case's precision.
ROUNDING_UNITS = 8

#: Threads the ``concurrent`` check runs at once, and calls each thread makes per plan.
CONCURRENT_THREADS = 4
CONCURRENT_ROUNDS = 3

#: Seconds a thread of the ``concurrent`` check may take for its calls before the check fails.
CONCURRENT_TIMEOUT_SECONDS = 120.0

#: Largest n for which ``convolution`` forms the exact circular convolution by direct sums
#: (``numpy.convolve`` on the integers held in float64, exact: see
#: :func:`_exact_circular_convolution`); above it the exact result comes from the reference
#: transforms and is rounded to the integers it must be.
DIRECT_CONVOLUTION_MAX_N = 4096
#: Integer inputs of ``convolution`` lie in [-CONVOLUTION_RANGE, CONVOLUTION_RANGE].
CONVOLUTION_RANGE = 8

COMPANION_KIND = {"fft": "ifft", "ifft": "fft", "rfft": "irfft", "irfft": "rfft"}
_SQRT2 = float(np.sqrt(2.0))


class OutputProblem(Exception):
    """An output a value check cannot compare (wrong shape, not numbers); carries a diagnosis code."""

    def __init__(self, code: str, message: str):
        super().__init__(message)
        self.code = code
        self.message = message


def _one_line(text: Any) -> str:
    return " ".join(str(text).split())


def _norm(v: np.ndarray) -> float:
    """Return the 2-norm of ``v`` as a float, computed in ``v``'s own precision."""
    v = np.asarray(v)
    if v.size == 0:
        return 0.0
    return float(np.sqrt(np.sum(np.real(v) ** 2 + np.imag(v) ** 2)))


def _ratio(num: float, den: float) -> float:
    if den == 0.0:
        return 0.0 if num == 0.0 else float("inf")
    return num / den


def _finite(v: float | None) -> float | None:
    return v if v is None or np.isfinite(v) else None


def _fmt_eps(value: float, dtype: str) -> str:
    return f"{bounds.eps_units(value, dtype):.3g} eps" if np.isfinite(value) else "not finite"


def _hermitian_full(half: np.ndarray, n: int) -> np.ndarray:
    """Return the length-n Hermitian spectrum whose first n//2 + 1 values are ``half``
    (imaginary parts of DC and, for even n, Nyquist dropped, as irfft does)."""
    full = np.zeros(n, dtype=half.dtype)
    full[: n // 2 + 1] = half[: n // 2 + 1]
    full[0] = full[0].real
    if n % 2 == 0:
        full[n // 2] = full[n // 2].real
    k = np.arange(1, (n + 1) // 2)
    full[n - k] = np.conj(half[k])
    return full


def _clean_half(x: np.ndarray, n: int) -> np.ndarray:
    """Return a half spectrum with the imaginary parts irfft ignores set to zero (a copy)."""
    x = np.array(x, copy=True)
    x[0] = x[0].real
    if n % 2 == 0:
        x[n // 2] = x[n // 2].real
    return x


@dataclass
class CheckContext:
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
    _companions: dict = field(default_factory=dict, repr=False)
    _diagnosis: tuple[str, str] | None = field(default=None, repr=False)

    def __post_init__(self) -> None:
        if self.limit is None:
            self.limit = bounds.accuracy_limit(self.case)

    # -- what the case is --------------------------------------------------------------------
    @property
    def label(self) -> str:
        """The backend's label as rows show it."""
        return self.backend.label

    @property
    def capabilities(self) -> Capabilities:
        """The backend's claims."""
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

    @property
    def scale(self) -> Any:
        """The case's normalisation factor, in the work precision."""
        return _wide_norm_factor(self.case, self.work_dtype)

    # -- inputs ----------------------------------------------------------------------------------
    def rng(self, purpose: str) -> np.random.Generator:
        """Return the generator for ``purpose`` (backend independent)."""
        return inputs.case_rng(self.seed, self.case, purpose)

    def random_input(self, purpose: str, distribution: str = "gaussian", case: Case | None = None) -> np.ndarray:
        """Return a random input of ``case`` (default: this case) drawn for ``purpose``."""
        case = case or self.case
        x = inputs.random_input(case, inputs.case_rng(self.seed, case, purpose), distribution)
        return _clean_half(x, case.n) if case.kind == "irfft" else x

    def as_input(self, values: np.ndarray, case: Case | None = None) -> np.ndarray:
        """Return ``values`` rounded to the input dtype of ``case`` (real part only for a real input)."""
        case = case or self.case
        values = np.asarray(values)
        if case.input_dtype.kind == "f":
            values = np.real(values)
        x = np.ascontiguousarray(values.astype(case.input_dtype))
        return _clean_half(x, case.n) if case.kind == "irfft" else x

    # -- running the backend ---------------------------------------------------------------
    def run(self, x: np.ndarray, plan: Plan | None = None, copy_input: bool = True) -> np.ndarray:
        """Return a copy of ``plan.execute(x)`` as an ndarray (plans may reuse output buffers).

        ``copy_input`` True passes a copy of ``x``, so a backend that writes to its input
        cannot spoil the check's own arrays.

        Raises
        ------
        BackendFailure
            When the backend raises.
        OutputProblem
            When it returns something that is not an array of numbers.
        """
        plan = plan or self.plan
        arg = np.array(x, copy=True) if copy_input else x
        try:
            with np.errstate(all="ignore"):
                out = plan.execute(arg)
        except Exception as exc:  # noqa: BLE001 - any exception of the backend is an error row
            raise BackendFailure(f"the backend raised {type(exc).__name__}: {_one_line(exc)}") from None
        return _copy_output(out)

    def output(self, y: np.ndarray, case: Case | None = None) -> np.ndarray:
        """Return ``y`` as a work-precision complex array after checking its shape and kind.

        Raises
        ------
        OutputProblem
            ``shape`` for a wrong shape, ``dtype`` for an output that is not floating-point.
        """
        case = case or self.case
        if y.dtype.kind not in "fc":
            raise OutputProblem("dtype", f"output has dtype {y.dtype}, not a floating-point or complex type")
        if y.shape != (case.output_length,):
            raise OutputProblem("shape", f"output has shape {y.shape} where ({case.output_length},) is due")
        return y.astype(self.work_dtype)

    def transform(self, x: np.ndarray, plan: Plan | None = None, case: Case | None = None) -> np.ndarray:
        """Return the checked output of ``x`` (see :meth:`run` and :meth:`output`)."""
        return self.output(self.run(x, plan), case)

    def companion(self) -> tuple[Plan | None, Case, str | None]:
        """Return ``(plan, case, None)`` for the inverse kind of this case, or ``(None, case, reason)``.

        Raises
        ------
        BackendFailure
            When planning the companion raises.
        """
        case = Case(COMPANION_KIND[self.case.kind], self.case.dtype, self.case.n, self.case.norm)
        if case not in self._companions:
            reason = self.backend.unsupported_reason(case)
            if reason is not None:
                self._companions[case] = (None, reason)
            else:
                try:
                    self._companions[case] = (self.backend.plan(case), None)
                except Exception as exc:  # noqa: BLE001
                    raise BackendFailure(f"planning {case.kind} raised {type(exc).__name__}: "
                                         f"{_one_line(exc)}") from None
        plan, reason = self._companions[case]
        return plan, case, reason

    def close(self) -> None:
        """Close the companion plans this context made (the main plan is the caller's)."""
        for plan, _ in self._companions.values():
            if plan is not None:
                try:
                    plan.close()
                except Exception:  # noqa: BLE001 - closing must not raise into the battery
                    pass
        self._companions.clear()

    # -- verdicts ----------------------------------------------------------------------------------
    def row(self, check: str, status: str, value: float | None = None, limit: float | None = None,
            diagnosis: str | None = None, message: str = "", eps: bool = True,
            reference: str | None = None) -> CheckRow:
        """Return one row of this case; ``eps_units`` from ``value`` when ``eps`` is True."""
        value = _finite(value)
        eps_units = bounds.eps_units(value, self.case.dtype) if (eps and value is not None) else None
        return CheckRow(backend=self.label, kind=self.case.kind, dtype=self.case.dtype, n=self.case.n,
                        check=check, status=status, value=value, limit=limit, eps_units=eps_units,
                        diagnosis=diagnosis if status == "fail" else None, message=message,
                        norm=self.case.norm, reference=reference)

    def diagnose(self, x: np.ndarray, y: np.ndarray) -> tuple[str, str]:
        """Return ``diagnose(case, x, y)``; a diagnosis that itself fails gives ``unknown``."""
        try:
            return diagnose(self.case, x, y, self.reference_fn, self.limit)
        except Exception as exc:  # noqa: BLE001
            return "unknown", f"no diagnosis ({type(exc).__name__}: {_one_line(exc)})"

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
                    err = self.reference_fn(xr, self.case).relative_error(yr)
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


def _copy_output(out: Any) -> np.ndarray:
    if out is None:
        raise OutputProblem("dtype", "the backend returned None, not an array")
    try:
        y = np.array(out, copy=True)
    except Exception:  # noqa: BLE001
        raise OutputProblem("dtype", f"the backend returned a {type(out).__name__}, not an array") from None
    if y.dtype == object:
        raise OutputProblem("dtype", f"the backend returned a {type(out).__name__} of Python objects, not numbers")
    return y


def _wide_norm_factor(case: Case, work_dtype: np.dtype) -> Any:
    """Return :func:`fftgauge.harness.cases.norm_factor` in the work precision (long double for long double cases)."""
    if work_dtype != np.dtype(np.clongdouble):
        return norm_factor(case.n, case.norm, case.is_inverse)
    n = np.longdouble(case.n)
    if case.norm == "ortho":
        return np.longdouble(1) / np.sqrt(n)
    if (case.norm == "backward") == case.is_inverse:
        return np.longdouble(1) / n
    return np.longdouble(1)


def _phases(m: np.ndarray, n: int, work_dtype: np.dtype) -> np.ndarray:
    """Return ``exp(2j pi m / n)`` for integers ``m`` in the work precision (``m`` reduced mod n first)."""
    m = np.mod(np.asarray(m, dtype=np.int64), n)
    if work_dtype != np.dtype(np.clongdouble):
        return inputs.root_of_unity(m, n)
    angle = (np.arctan(np.longdouble(1)) * 8) * (m.astype(np.longdouble) / np.longdouble(n))
    return (np.cos(angle) + 1j * np.sin(angle)).astype(np.clongdouble)


def _relative(diff: np.ndarray, scale: float) -> float:
    return _ratio(_norm(diff), scale)


# -- accuracy ------------------------------------------------------------------------------------

def check_accuracy(ctx: CheckContext) -> list[CheckRow]:
    """Relative rms (= relative 2-norm) error against the ground truth, Gaussian and uniform inputs.

    Fails when the worse of the two exceeds :func:`fftgauge.harness.battery.bounds.accuracy_limit`; the
    message also gives the largest single error relative to the rms of the exact output.
    """
    worst = None
    for dist in ("gaussian", "uniform"):
        x = ctx.random_input(f"accuracy-{dist}", dist)
        raw = ctx.run(x)
        try:
            ctx.output(raw)
        except OutputProblem as problem:
            code, why = ctx.diagnose(x, raw)
            return [ctx.row("accuracy", "fail", diagnosis=code, message=f"{problem.message}; {why}")]
        ref = ctx.reference_fn(x, ctx.case)
        err = ref.error(raw)
        ref_norm = _norm(ref.hi)
        rel2 = _ratio(_norm(err), ref_norm)
        rms = ref_norm / np.sqrt(max(1, err.shape[0]))
        rel_max = _ratio(float(np.max(np.abs(err))) if err.size else 0.0, rms)
        if worst is None or not rel2 <= worst[0]:
            worst = (rel2, rel_max, dist, x, raw, ref.method)
    rel2, rel_max, dist, x, raw, method = worst
    dtype = ctx.case.dtype
    msg = (f"relative rms error {_fmt_eps(rel2, dtype)} (max {_fmt_eps(rel_max, dtype)} of the rms output), "
           f"worst on the {dist} input")
    return [ctx.verdict("accuracy", rel2, ctx.limit, msg, x, raw, reference=method)]


# -- Ergün's three -----------------------------------------------------------------------------

def check_linearity(ctx: CheckContext) -> list[CheckRow]:
    """F(a x + b y) against a F(x) + b F(y) for random inputs and random coefficients.

    Complex coefficients for the complex kinds, real ones for rfft and irfft (whose inputs
    must stay real or Hermitian). Measured relative to
    S = norm F(ax+by) + |a| norm F(x) + |b| norm F(y): at most ``limit`` plus rounding.
    """
    x = ctx.random_input("linearity-x")
    y = ctx.random_input("linearity-y")
    rng = ctx.rng("linearity-coefficients")
    if ctx.case.is_real:
        a, b = rng.standard_normal(2)
    else:
        a, b = rng.standard_normal(2) + 1j * rng.standard_normal(2)
    w = ctx.work_dtype
    z = ctx.as_input(a * x.astype(w) + b * y.astype(w))
    raw = ctx.run(x)
    fx, fy, fz = ctx.output(raw), ctx.transform(y), ctx.transform(z)
    rhs = a * fx + b * fy
    s = _norm(fz) + abs(a) * _norm(fx) + abs(b) * _norm(fy)
    value = _relative(fz - rhs, s)
    tol = ctx.limit + ctx.rounding
    msg = (f"F(a x + b y) - (a F(x) + b F(y)) is {_fmt_eps(value, ctx.case.dtype)} of the transforms' norms "
           f"(a = {a:.3g}, b = {b:.3g})")
    return [ctx.verdict("linearity", value, tol, msg, x, raw)]


def _impulse_response(case: Case, m: int, work_dtype: np.dtype, scale: Any) -> np.ndarray:
    """Return the exact output for a unit impulse at input position ``m`` (closed form).

    fft: exp(-2j pi k m / N); ifft: exp(+2j pi k m / N); rfft: the first N//2+1 of fft's;
    irfft (impulse at frequency m of the half spectrum): 1 for m = 0, (-1)^j for m = N/2,
    else 2 cos(2 pi m j / N); each times the case's normalisation factor.
    Source: Oppenheim & Schafer, 3rd ed., ch. 8 (from memory; verified in the tests).
    """
    n = case.n
    k = np.arange(case.output_length, dtype=np.int64)
    if case.kind == "irfft":
        ph = _phases(k * m, n, work_dtype)
        values = ph.real * (1 if m == 0 or 2 * m == n else 2)
        return (values * scale).astype(work_dtype)
    sign = 1 if case.is_inverse else -1
    return (_phases(sign * k * m, n, work_dtype) * scale).astype(work_dtype)


def check_impulse(ctx: CheckContext) -> list[CheckRow]:
    """F(delta_m) against the closed form, for up to three random positions m.

    One computed transform against an exact closed form (evaluated to the work precision's
    last bit): at most ``limit`` plus rounding, relative to the closed form's norm.
    """
    case = ctx.case
    rng = ctx.rng("impulse")
    count = min(3, case.input_length)
    positions = [int(m) for m in rng.choice(case.input_length, size=count, replace=False)]
    tol = ctx.limit + ctx.rounding
    worst = (-1.0, None, None, None)
    for m in positions:
        x = np.zeros(case.input_length, dtype=case.input_dtype)
        x[m] = 1
        raw = ctx.run(x)
        y = ctx.output(raw)
        expected = _impulse_response(case, m, ctx.work_dtype, ctx.scale)
        value = _relative(y - expected, _norm(expected))
        if not value <= worst[0]:
            worst = (value, m, x, raw)
    value, m, x, raw = worst
    msg = (f"impulse responses at m = {', '.join(map(str, positions))}: worst (m = {m}) off by "
           f"{_fmt_eps(value, case.dtype)}")
    return [ctx.verdict("impulse", value, tol, msg, x, raw)]


def check_time_shift(ctx: CheckContext) -> list[CheckRow]:
    """F(x[n - m]) against W^(k m) F(x) (fft, rfft; the conjugate phase for ifft) for a random m.

    irfft, whose input is a spectrum, is checked the other way round: a phase ramp on the
    half spectrum, X[k] exp(-2j pi k m / N), must roll the output by m. Relative to
    S = norm of both computed transforms: at most ``limit`` plus rounding.
    """
    case, n = ctx.case, ctx.case.n
    if n < 2:
        return [ctx.row("time-shift", "skip", message="n = 1 has no non-trivial shift")]
    m = int(ctx.rng("time-shift").integers(1, n))
    x = ctx.random_input("time-shift")
    raw = ctx.run(x)
    fx = ctx.output(raw)
    k = np.arange(case.output_length, dtype=np.int64)
    if case.kind == "irfft":
        ramp = _phases(-(np.arange(case.input_length, dtype=np.int64) * m), n, ctx.work_dtype)
        shifted = ctx.as_input(x.astype(ctx.work_dtype) * ramp)
        lhs = ctx.transform(shifted)
        rhs = np.roll(fx, m)
        what = f"a phase ramp exp(-2j pi k {m} / N) on the spectrum vs the output rolled by {m}"
    else:
        sign = 1 if case.is_inverse else -1
        lhs = ctx.transform(np.roll(x, m))
        rhs = _phases(sign * k * m, n, ctx.work_dtype) * fx
        what = f"x rolled by {m} vs the output times W^(k {m})"
    value = _relative(lhs - rhs, _norm(lhs) + _norm(fx))
    msg = f"{what}: off by {_fmt_eps(value, case.dtype)}"
    return [ctx.verdict("time-shift", value, ctx.limit + ctx.rounding, msg, x, raw)]


# -- other properties of the DFT -------------------------------------------------------------------

def _energy(v: np.ndarray) -> np.longdouble:
    """Return sum |v|^2 in long double."""
    w = v.astype(np.clongdouble)
    return np.sum(w.real**2 + w.imag**2)


def _half_energy(half: np.ndarray, n: int) -> np.longdouble:
    """Return the energy (in long double) of the Hermitian spectrum a half spectrum stands for."""
    w = half.astype(np.clongdouble)
    e = w.real**2 + w.imag**2
    total = e[0] + 2 * np.sum(e[1:(n + 1) // 2])
    if n % 2 == 0 and n > 1:
        total = total + e[n // 2]
    return total


def check_parseval(ctx: CheckContext) -> list[CheckRow]:
    """Energy: sum |F(x)|^2 = c^2 N sum |x|^2, c the normalisation factor (Parseval).

    Source: Oppenheim & Schafer, 3rd ed., Table 8.2 (from memory; verified in the tests).
    An output error e with norm(e) <= limit norm(X) changes the energy by at most
    (2 limit + limit^2) of it; for rfft the half spectrum's error counts up to sqrt(2) times
    in the full spectrum's energy.
    """
    case, n = ctx.case, ctx.case.n
    x = ctx.random_input("parseval")
    raw = ctx.run(x)
    y = ctx.output(raw)
    e_in = _half_energy(x, n) if case.kind == "irfft" else _energy(x)
    e_out = _half_energy(y, n) if case.kind == "rfft" else _energy(y)
    c = np.longdouble(ctx.scale)
    expected = c * c * n * e_in
    value = float(abs(e_out / expected - 1)) if expected else (0.0 if e_out == 0 else float("inf"))
    g = _SQRT2 if case.kind == "rfft" else 1.0
    tol = 2 * g * ctx.limit + (g * ctx.limit) ** 2 + ctx.rounding
    msg = f"output energy / (c^2 N input energy) = 1 {'+' if e_out >= expected else '-'} {value:.3g}"
    return [ctx.verdict("parseval", value, tol, msg, x, raw)]


def check_round_trip(ctx: CheckContext) -> list[CheckRow]:
    """The inverse of the forward gives back the input: ifft(fft(x)), fft(ifft(x)),
    irfft(rfft(x)), rfft(irfft(X)), the companion planned with the same backend.

    Skipped when the backend does not claim the companion kind. Relative to norm(x): the
    first transform's error carried through the (scaled unitary) second, at most ``limit``
    (sqrt(2) limit for a half spectrum), plus the second's own ``limit``.
    """
    plan, comp, reason = ctx.companion()
    if plan is None:
        return [ctx.row("round-trip", "skip", message=f"needs {comp.kind}: {reason}")]
    case = ctx.case
    x = ctx.random_input("round-trip")
    raw = ctx.run(x)
    y = ctx.output(raw)
    back = ctx.transform(ctx.as_input(y, comp), plan, comp)
    target = x.astype(ctx.work_dtype)
    value = _relative(back - target, _norm(target))
    g = _SQRT2 if case.is_real else 1.0
    tol = g * ctx.limit + bounds.accuracy_limit(comp) + ctx.rounding
    msg = f"{comp.kind}({case.kind}(x)) misses x by {_fmt_eps(value, case.dtype)}"
    if np.isfinite(value) and value <= tol:
        return [ctx.row("round-trip", "pass", value, tol, message=msg)]
    code, why = _companion_fault(ctx, comp, target, back)
    return [ctx.row("round-trip", "fail", value, tol, diagnosis=code, message=f"{msg}; {why}")]


def _companion_fault(ctx: CheckContext, comp: Case, target: np.ndarray, back: np.ndarray,
                     subject: str = "the round trip gives the input") -> tuple[str, str]:
    """Return the diagnosis of a failed trip through the companion transform: the case's own
    transform when it is wrong, else what the trip did to the signal (the companion's fault)."""
    found = ctx.random_diagnosis()
    if found is not None:
        return found
    code, why = diagnose_round_trip(target, back, ctx.case.n, reversed_ok=ctx.case.kind != "irfft", subject=subject)
    return code, f"{ctx.case.kind} is accurate, so {comp.kind} is at fault: {why}"


def _real_signals(ctx: CheckContext) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Return a real, a real even and a real odd signal of length n (float64)."""
    n = ctx.case.n
    v = ctx.rng("symmetry").standard_normal(n)
    rev = v[(-np.arange(n)) % n]
    return v, (v + rev) / 2, (v - rev) / 2


def check_symmetry(ctx: CheckContext) -> list[CheckRow]:
    """Symmetries of the DFT of real signals (Oppenheim & Schafer, 3rd ed., Table 8.2, from memory).

    fft/ifft: a real input gives a Hermitian output (X[N-k] = conj X[k]); a real even input
    a real output; a real odd input an imaginary one. rfft: the DC (and even-N Nyquist)
    outputs of a real input are real, and the even/odd rules. irfft: a real half spectrum
    gives an even output, an imaginary one (zero DC and Nyquist) an odd output. The
    Hermitian and even/odd-output parts compare the output with itself, so S = 2 norm(X);
    the real/imaginary parts compare it with an exact zero, S = norm(X).
    """
    case, n = ctx.case, ctx.case.n
    real, even, odd = _real_signals(ctx)
    idx = (-np.arange(n)) % n
    parts: list[tuple[str, float, np.ndarray, np.ndarray]] = []
    if case.kind == "irfft":
        half = n // 2 + 1
        x_even = ctx.as_input(even[:half].astype(np.complex128))
        spec = 1j * real[:half]
        spec[0] = 0
        if n % 2 == 0:
            spec[n // 2] = 0
        x_odd = ctx.as_input(spec)
        raw = ctx.run(x_even)
        out = ctx.output(raw)
        parts.append(("real spectrum -> even output", _relative(out[idx] - out, 2 * _norm(out)), x_even, raw))
        if n >= 3:
            raw = ctx.run(x_odd)
            out = ctx.output(raw)
            parts.append(("imaginary spectrum -> odd output", _relative(out[idx] + out, 2 * _norm(out)), x_odd,
                          raw))
    else:
        x_real = ctx.as_input(real)
        raw = ctx.run(x_real)
        out = ctx.output(raw)
        if case.kind == "rfft":
            ends = [out[0].imag] + ([out[n // 2].imag] if n % 2 == 0 else [])
            parts.append(("real input -> real DC/Nyquist", _ratio(_norm(np.array(ends)), _norm(out)), x_real, raw))
        else:
            parts.append(("real input -> Hermitian output", _relative(out[idx] - np.conj(out), 2 * _norm(out)),
                          x_real, raw))
        x_even = ctx.as_input(even)
        raw = ctx.run(x_even)
        out = ctx.output(raw)
        parts.append(("real even -> real", _ratio(_norm(out.imag), _norm(out)), x_even, raw))
        if n >= 3:
            x_odd = ctx.as_input(odd)
            raw = ctx.run(x_odd)
            out = ctx.output(raw)
            parts.append(("real odd -> imaginary", _ratio(_norm(out.real), _norm(out)), x_odd, raw))
    tol = ctx.limit + ctx.rounding
    worst = max(parts, key=lambda p: p[1] if np.isfinite(p[1]) else float("inf"))
    msg = "; ".join(f"{name}: {_fmt_eps(v, case.dtype)}" for name, v, _, _ in parts)
    if n < 3:
        msg += " (no odd part: a real odd signal of length n < 3 is zero)"
    return [ctx.verdict("symmetry", worst[1], tol, msg, worst[2], worst[3])]


def check_modulation(ctx: CheckContext) -> list[CheckRow]:
    """Modulation: x[n] W^(-k0 n) -> X[k - k0] (fft; the conjugate ramp for ifft).

    rfft: x[n] cos(2 pi k0 n / N) -> (X[k - k0] + X[k + k0]) / 2 with X the Hermitian
    extension of the half spectrum; irfft: the same spectrum combination must multiply the
    output by cos(2 pi k0 n / N). Source: Oppenheim & Schafer, 3rd ed., Table 8.2 (from
    memory). Relative to the sum of the computed transforms' norms (sqrt(2) for an extended
    half spectrum): at most ``limit`` plus rounding.
    """
    case, n = ctx.case, ctx.case.n
    if n < 2:
        return [ctx.row("modulation", "skip", message="n = 1 has no non-zero frequency")]
    k0 = int(ctx.rng("modulation").integers(1, n))
    x = ctx.random_input("modulation")
    raw = ctx.run(x)
    fx = ctx.output(raw)
    w = ctx.work_dtype
    j = np.arange(n, dtype=np.int64)
    if case.kind in ("fft", "ifft"):
        sign = -1 if case.is_inverse else 1
        lhs = ctx.transform(ctx.as_input(x.astype(w) * _phases(sign * j * k0, n, w)))
        rhs = np.roll(fx, k0)
        s = _norm(lhs) + _norm(fx)
    elif case.kind == "rfft":
        cosine = _phases(j * k0, n, w).real
        lhs = ctx.transform(ctx.as_input(x.astype(w) * cosine))
        full = _hermitian_full(fx, n)
        rhs = ((np.roll(full, k0) + np.roll(full, -k0)) / 2)[: case.output_length]
        s = _norm(lhs) + _SQRT2 * _norm(fx)
    else:
        full = _hermitian_full(x.astype(w), n)
        spec = ((np.roll(full, k0) + np.roll(full, -k0)) / 2)[: case.input_length]
        lhs = ctx.transform(ctx.as_input(spec))
        rhs = fx * _phases(j * k0, n, w).real
        s = _norm(lhs) + _norm(fx)
    value = _relative(lhs - rhs, s)
    msg = f"modulation by k0 = {k0}: off by {_fmt_eps(value, case.dtype)}"
    return [ctx.verdict("modulation", value, ctx.limit + ctx.rounding, msg, x, raw)]


def _integer_input(ctx: CheckContext, purpose: str) -> np.ndarray:
    """Return a random input of small integers (exact in every precision), valid for the case."""
    case = ctx.case
    rng = ctx.rng(purpose)
    r = CONVOLUTION_RANGE
    re = rng.integers(-r, r + 1, case.input_length)
    if case.kind == "rfft":
        return re.astype(case.input_dtype)
    im = rng.integers(-r, r + 1, case.input_length)
    return ctx.as_input(re + 1j * im)


def _exact_circular_convolution(xf: np.ndarray, yf: np.ndarray) -> np.ndarray:
    """Return the circular convolution of two complex arrays of integers, exactly (complex128).

    The real and imaginary parts are combined from four real linear convolutions
    (``numpy.convolve``) wrapped modulo n. They run on the integers held in float64, which is
    exact: every product and every partial sum is an integer of magnitude at most
    ``n CONVOLUTION_RANGE^2`` (about 2.6 x 10^5 at n = 4096), far below 2^53, so no rounding
    happens whatever order the sums are taken in (IEEE Std 754-2019: integers up to 2^53 and
    their sums and products below it are exact in binary64). Float64 rather than int64 because
    numpy sums float64 products with vectorised dot products, several times faster.
    """
    n = xf.shape[0]
    xr, xi = np.rint(xf.real), np.rint(xf.imag)
    yr, yi = np.rint(yf.real), np.rint(yf.imag)

    def circ(a: np.ndarray, b: np.ndarray) -> np.ndarray:
        lin = np.convolve(a, b)
        out = lin[:n].copy()
        out[: lin.shape[0] - n] += lin[n:]
        return out

    return (circ(xr, yr) - circ(xi, yi)) + 1j * (circ(xr, yi) + circ(xi, yr))


def _circular_convolution(ctx: CheckContext, x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Return the exact circular convolution of two integer-valued inputs (complex128, integers).

    For irfft (inputs are half spectra) it is the half of the convolution of the Hermitian
    extensions, which is again Hermitian with real DC and Nyquist values.
    """
    case, n = ctx.case, ctx.case.n
    if case.kind == "irfft":
        xf, yf = _hermitian_full(x.astype(np.complex128), n), _hermitian_full(y.astype(np.complex128), n)
    else:
        xf, yf = x.astype(np.complex128), y.astype(np.complex128)
    if n <= DIRECT_CONVOLUTION_MAX_N:
        z = _exact_circular_convolution(xf, yf)
    else:
        fwd = Case("fft", "float64", n)
        inv = Case("ifft", "float64", n)
        prod = ctx.reference_fn(xf, fwd).values() * ctx.reference_fn(yf, fwd).values()
        approx = ctx.reference_fn(prod, inv).values()
        z = np.rint(approx.real.astype(np.float64)) + 1j * np.rint(approx.imag.astype(np.float64))
        off = float(np.max(np.abs(approx - z))) if n else 0.0
        if off > 0.25:
            raise RuntimeError(f"exact convolution could not be formed (rounding residual {off:.3g})")
    return z[: case.input_length] if case.kind == "irfft" else z


def check_convolution(ctx: CheckContext) -> list[CheckRow]:
    """Circular convolution theorem: F(x) F(y) / c = F(x (*) y), c the normalisation factor.

    The inputs are small random integers, so the circular convolution z is formed exactly
    (sums of integer products, :func:`_exact_circular_convolution`; for large n the reference
    transforms rounded to integers). With the
    companion inverse, inverse(F(x) F(y) / c) is compared with z; without it, F(x) F(y) / c
    with the reference transform of z. For irfft (spectra in, signals out) the product is of
    the outputs and z convolves the Hermitian spectra. Source: Oppenheim & Schafer, 3rd ed.,
    Table 8.2 (from memory). Tolerance: an elementwise product of transforms with errors
    e_x, e_y is off by at most norm(e_x) max|F(y)| + max|F(x)| norm(e_y) (+ their product),
    i.e. ``limit`` times S = (norm F(x) max|F(y)| + max|F(x)| norm F(y)) / |c|, relative to
    norm F(z); the inverse carries that through (sqrt(2) for half spectra) and adds its own
    ``limit``.
    """
    case = ctx.case
    x, y = _integer_input(ctx, "convolution-x"), _integer_input(ctx, "convolution-y")
    raw = ctx.run(x)
    fx, fy = ctx.output(raw), ctx.transform(y)
    c = ctx.scale
    product = fx * fy / c
    z = _circular_convolution(ctx, x, y)
    s = (_norm(fx) * float(np.max(np.abs(fy))) + float(np.max(np.abs(fx))) * _norm(fy)) / abs(float(c))
    carried = (ctx.limit + ctx.limit**2) * _ratio(s, _norm(product)) + 2 * ctx.unit_roundoff
    plan, comp, _ = ctx.companion()
    if plan is not None:
        back = ctx.transform(ctx.as_input(product, comp), plan, comp)
        target = z.astype(ctx.work_dtype)
        value = _relative(back - target, _norm(target))
        g = _SQRT2 if case.is_real else 1.0
        tol = bounds.accuracy_limit(comp) + g * carried + ctx.rounding
        how = f"{comp.kind}(F(x) F(y) / c) vs the exact circular convolution"
        if not (np.isfinite(value) and value <= tol):
            code, why = _companion_fault(ctx, comp, target, back, subject="the trip gives the convolution")
            return [ctx.row("convolution", "fail", value, tol, diagnosis=code,
                            message=f"{how}: off by {_fmt_eps(value, case.dtype)}; {why}")]
    else:
        ref = ctx.reference_fn(ctx.as_input(z), case)
        value = _relative(product - ref.values().astype(ctx.work_dtype), _norm(ref.hi))
        tol = carried + ctx.rounding
        how = f"F(x) F(y) / c vs the exact transform of the exact circular convolution (no {comp.kind} to invert)"
    msg = f"{how}: off by {_fmt_eps(value, case.dtype)}"
    return [ctx.verdict("convolution", value, tol, msg, x, raw)]


# -- closed-form pairs ---------------------------------------------------------------------------

def _pair_setup(case: Case, pair: Any) -> tuple[np.ndarray, np.ndarray, str] | None:
    """Return (input values, expected unnormalised output, compare mode) of ``pair`` for ``case``,
    or None when the pair does not fit the kind.

    fft: the pair itself. ifft: conj(signal) -> conj(transform) (the inverse-sign sum of the
    conjugate is the conjugate of the forward sum). rfft: real signals only, the first N//2+1
    values. irfft: real signals with a full closed form only, by duality: the half of
    conj(transform) goes in, N signal[-n] comes out (the DFT applied twice reverses and
    multiplies by N).
    """
    from fftgauge.harness.battery.pairs import pair_values

    n = case.n
    s, t = pair_values(pair, n)
    if case.kind == "fft":
        return s, t, pair.compare
    if case.kind == "ifft":
        return np.conj(s), np.conj(t), pair.compare
    if case.kind == "rfft":
        if not pair.real:
            return None
        return s.real, t[: n // 2 + 1], pair.compare
    if not pair.real or pair.compare != "full":
        return None
    return np.conj(t)[: n // 2 + 1], n * s[(-np.arange(n)) % n], "full"


def check_pairs(ctx: CheckContext) -> list[CheckRow]:
    """Known transform pairs with closed forms (:data:`fftgauge.harness.battery.pairs.PAIRS`, each naming its source).

    Each applicable pair's signal is transformed and compared with the closed form times the
    case's normalisation, as the pair says: ``full`` (every value), ``magnitude`` (|X[k]|
    only) or ``bin0`` (X[0] only, measured against norm2 of the whole exact output). One
    transform against an exact value, at most ``limit``; rounding the signal to the case's
    precision and the closed form's evaluation in double add
    :func:`fftgauge.harness.battery.pairs.closed_form_allowance` (times sqrt(2) for irfft, whose input is a
    half spectrum standing for a full one).
    """
    from fftgauge.harness.battery.pairs import PAIRS, closed_form_allowance

    case = ctx.case
    w = ctx.work_dtype
    tol = ctx.limit + (_SQRT2 if case.kind == "irfft" else 1.0) * closed_form_allowance(case.dtype)
    results = []
    for pair in PAIRS:
        if not pair.applies(case.n):
            continue
        setup = _pair_setup(case, pair)
        if setup is None:
            continue
        values, expected, mode = setup
        x = ctx.as_input(values)
        raw = ctx.run(x)
        y = ctx.output(raw)
        e = expected.astype(w) * ctx.scale
        if mode == "full":
            value = _relative(y - e, _norm(e))
        elif mode == "magnitude":
            value = _relative(np.abs(y) - np.abs(e), _norm(e))
        else:
            energy = _norm(x.astype(w)) * abs(float(ctx.scale)) * np.sqrt(case.n)  # norm2 of the full output
            value = _ratio(float(abs(y[0] - e[0])), energy)
        results.append((value, pair.name, mode, x, raw))
    if not results:
        return [ctx.row("pairs", "skip", message=f"no closed-form pair applies to {case.kind} n = {case.n}")]
    worst = max(results, key=lambda r: r[0] if np.isfinite(r[0]) else float("inf"))
    failing = [r[1] for r in results if not (np.isfinite(r[0]) and r[0] <= tol)]
    msg = (f"{len(results)} pairs ({', '.join(r[1] for r in results)}); worst {worst[1]} ({worst[2]}): "
           f"{_fmt_eps(worst[0], case.dtype)}")
    if failing:
        msg += f"; failing: {', '.join(failing)}"
    return [ctx.verdict("pairs", worst[0], tol, msg, worst[3], worst[4])]


# -- behaviour -------------------------------------------------------------------------------------

def check_input_intact(ctx: CheckContext) -> list[CheckRow]:
    """The caller's input array is left unchanged (unless the backend declares ``in_place``)."""
    x = ctx.random_input("input-intact")
    keep = x.copy()
    ctx.run(x, copy_input=False)
    changed = int(np.count_nonzero(_mismatched(keep, x)))
    if not changed:
        return [ctx.row("input-intact", "pass", eps=False, message="the input array is unchanged")]
    what = f"the backend changed {changed} of {x.shape[0]} input values"
    if ctx.capabilities.in_place:
        return [ctx.row("input-intact", "pass", float(changed), eps=False,
                        message=f"{what}, which it declares (in_place)")]
    return [ctx.row("input-intact", "fail", float(changed), 0.0, diagnosis="input-modified", eps=False,
                    message=f"{what}; it does not declare in_place")]


def _mismatched(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Return a mask of the positions where ``a`` and ``b`` (same shape) differ as floating-point
    values: a different number, a different sign of zero, or a NaN against a non-NaN.

    Values rather than bytes, because long double arrays carry padding bytes whose contents
    are arbitrary.
    """
    out = np.zeros(a.shape, dtype=bool)
    for part in (np.real, np.imag):
        pa, pb = part(a), part(b)
        both_nan = np.isnan(pa) & np.isnan(pb)
        out |= ~(both_nan | ((pa == pb) & (np.signbit(pa) == np.signbit(pb))))
    return out


def _same_bytes(a: np.ndarray, b: np.ndarray) -> bool:
    """Return True when ``a`` and ``b`` (same shape and dtype) hold identical bytes.

    Identical bytes are identical values; the converse fails only for values that compare
    equal with different bits (NaN payloads, long double padding), which
    :func:`_mismatched` then sorts out.
    """
    if not (a.flags.c_contiguous and b.flags.c_contiguous):
        return False
    return bool(np.array_equal(a.reshape(-1).view(np.uint8), b.reshape(-1).view(np.uint8)))


def _differences(a: np.ndarray, b: np.ndarray) -> tuple[int, float]:
    """Return (count of values that differ, largest difference relative to norm2(a))."""
    if a.shape != b.shape or a.dtype != b.dtype:
        return max(a.size, b.size, 1), float("inf")
    if _same_bytes(a, b):  # the same bytes are the same values (padding bytes included)
        return 0, 0.0
    if a.dtype.kind not in "fc":
        count = int(np.count_nonzero(a != b))
        return count, (float("inf") if count else 0.0)
    count = int(np.count_nonzero(_mismatched(a, b)))
    if not count:
        return 0, 0.0
    diff = np.abs(a.astype(np.clongdouble) - b.astype(np.clongdouble))
    return count, _ratio(float(np.max(diff)) if diff.size else 0.0, _norm(a))


def check_repeatable(ctx: CheckContext) -> list[CheckRow]:
    """The same input twice (and again after another input) gives bitwise the same output."""
    x = ctx.random_input("repeatable")
    other = ctx.random_input("repeatable-other")
    first = ctx.run(x)
    second = ctx.run(x)
    ctx.run(other)
    third = ctx.run(x)
    for label, again in (("the next call", second), ("a call after another input", third)):
        count, rel = _differences(first, again)
        if count:
            return [ctx.row("repeatable", "fail", rel, 0.0, diagnosis="nondeterministic",
                            message=f"the same input gave different outputs on {label}: {count} of "
                                    f"{first.size} values differ (largest by {rel:.3g} of the output norm)")]
    return [ctx.row("repeatable", "pass", 0.0, 0.0,
                    message="three calls on the same input (one after another input) agree bitwise")]


class ThreadCrew:
    """A fixed set of daemon threads that run one task each, all at the same time, on request.

    :meth:`run` hands ``tasks[i]`` to thread ``i`` and waits until every one has returned.
    The threads live as long as the process (or until a task overruns, see :func:`_thread_crew`).
    """

    def __init__(self, size: int):
        self.size = size
        self._inboxes: list[queue.SimpleQueue] = [queue.SimpleQueue() for _ in range(size)]
        self._done: queue.SimpleQueue = queue.SimpleQueue()
        self._lock = threading.Lock()
        #: The process that started the threads (a forked child has none of them).
        self.pid = os.getpid()
        #: True once a task overran: its thread may still be busy, so the crew is not reused.
        self.broken = False
        for i, inbox in enumerate(self._inboxes):
            threading.Thread(target=self._serve, args=(inbox,), name=f"fftgauge-concurrent-{i}", daemon=True).start()

    def _serve(self, inbox: queue.SimpleQueue) -> None:
        while True:
            task = inbox.get()
            try:
                task()
            except BaseException:  # noqa: BLE001 - a task reports its own failures; the crew goes on
                pass
            finally:
                self._done.put(None)

    def run(self, tasks: list[Callable[[], None]], timeout_seconds: float) -> bool:
        """Run ``tasks[i]`` on thread ``i`` (at most :attr:`size` tasks) and wait for them.

        Returns True when every task returned within ``timeout_seconds`` (counted from the
        start), False otherwise (the crew must then not be used again: a thread is still busy).

        Raises
        ------
        ValueError
            For more tasks than threads.
        RuntimeError
            When the crew is broken (see :func:`_thread_crew`, which replaces such a crew).
        """
        if len(tasks) > self.size:
            raise ValueError(f"{len(tasks)} tasks for a crew of {self.size} threads")
        with self._lock:
            if self.broken:
                raise RuntimeError("internal: this thread crew has a thread still busy with an overrun task")
            for inbox, task in zip(self._inboxes, tasks):
                inbox.put(task)
            end = time.monotonic() + timeout_seconds
            for _ in tasks:
                try:
                    self._done.get(timeout=max(0.0, end - time.monotonic()))
                except queue.Empty:
                    self.broken = True
                    return False
            return True


_CREW: list[ThreadCrew] = []
_CREW_LOCK = threading.Lock()


def _thread_crew() -> ThreadCrew:
    """Return this process's crew of ``CONCURRENT_THREADS`` threads, starting it when there is none.

    A crew whose task overran (a thread still stuck in a backend) is replaced by a fresh one,
    as is a crew inherited through ``fork`` (its threads do not exist in the child).
    """
    with _CREW_LOCK:
        if _CREW and (_CREW[0].pid != os.getpid() or _CREW[0].broken):
            _CREW.clear()
        if not _CREW:
            _CREW.append(ThreadCrew(CONCURRENT_THREADS))
        return _CREW[0]


def check_concurrent(ctx: CheckContext) -> list[CheckRow]:
    """Several threads calling the same plan, and separately planned plans, at once.

    ``CONCURRENT_THREADS`` threads each transform their own input ``CONCURRENT_ROUNDS`` times
    through the shared plan and through a plan of their own, all released together. Every
    result must equal the same call made alone, bitwise, or within the accuracy limit when
    the single-threaded calls are not bitwise repeatable themselves. A plan that returns its
    own reused output buffer (as :class:`~fftgauge.backends.base.Plan` allows) cannot be shared
    between threads by design: for such a plan only the separately planned plans run.

    The threads are the process's :class:`ThreadCrew`, started once and reused by every
    case (starting four threads costs milliseconds on a busy machine, more than the calls
    themselves at small n); each call still runs on its own thread, at the same time as the
    others.
    """
    case = ctx.case
    xs = [ctx.random_input(f"concurrent-{t}") for t in range(CONCURRENT_THREADS)]
    alone = [ctx.run(x) for x in xs]
    repeatable = all(_differences(a, ctx.run(x))[0] == 0 for a, x in zip(alone, xs))
    try:
        with np.errstate(all="ignore"):
            probe_a = ctx.plan.execute(np.array(xs[0], copy=True))
            probe_b = ctx.plan.execute(np.array(xs[1 % len(xs)], copy=True))
    except Exception as exc:  # noqa: BLE001
        raise BackendFailure(f"the backend raised {type(exc).__name__}: {_one_line(exc)}") from None
    reuses_buffer = isinstance(probe_a, np.ndarray) and isinstance(probe_b, np.ndarray) and \
        np.shares_memory(probe_a, probe_b)
    own_plans = []
    try:
        for _ in range(CONCURRENT_THREADS):
            own_plans.append(ctx.backend.plan(case))
    except Exception as exc:  # noqa: BLE001
        for p in own_plans:
            p.close()
        raise BackendFailure(f"planning again raised {type(exc).__name__}: {_one_line(exc)}") from None
    barrier = threading.Barrier(CONCURRENT_THREADS, timeout=60)
    results: list[list[tuple[str, int, Any]]] = [[] for _ in range(CONCURRENT_THREADS)]

    def work(t: int) -> None:
        try:
            barrier.wait()
            for _ in range(CONCURRENT_ROUNDS):
                if not reuses_buffer:
                    results[t].append(("shared plan", t, _copy_output(ctx.plan.execute(np.array(xs[t], copy=True)))))
                results[t].append(("own plan", t, _copy_output(own_plans[t].execute(np.array(xs[t], copy=True)))))
        except Exception as exc:  # noqa: BLE001 - reported below
            results[t].append(("raised", t, exc))

    with np.errstate(all="ignore"):
        finished = _thread_crew().run([lambda t=t: work(t) for t in range(CONCURRENT_THREADS)],
                                      CONCURRENT_TIMEOUT_SECONDS)
    for p in own_plans:
        try:
            p.close()
        except Exception:  # noqa: BLE001
            pass
    calls = sum(len(r) for r in results)
    bad: list[str] = []
    worst = 0.0
    for per_thread in results:
        for how, t, out in per_thread:
            if how == "raised":
                bad.append(f"a concurrent call raised {type(out).__name__}: {_one_line(out)}")
                continue
            count, rel = _differences(alone[t], out)
            if count and (repeatable or not rel <= 2 * ctx.limit):
                bad.append(f"{how}: {count} of {out.size} values differ")
                worst = max(worst, rel)
    scope = "separately planned plans only (the plan reuses its output buffer)" if reuses_buffer else \
        "the shared plan and separately planned plans"
    if not finished:
        bad.append(f"a thread did not finish within {CONCURRENT_TIMEOUT_SECONDS:g} s")
    if bad:
        return [ctx.row("concurrent", "fail", _finite(worst), 0.0, diagnosis="thread-unsafe", eps=False,
                        message=f"{len(bad)} of {calls} calls from {CONCURRENT_THREADS} threads at once ({scope}) "
                                f"differ from the same call alone; first: {bad[0]}")]
    how = "bitwise" if repeatable else "within the accuracy limit (single-threaded calls are not repeatable)"
    return [ctx.row("concurrent", "pass", 0.0, 0.0, eps=False,
                    message=f"{calls} calls from {CONCURRENT_THREADS} threads at once ({scope}) equal the same "
                            f"calls alone, {how}")]


def check_nonfinite(ctx: CheckContext) -> list[CheckRow]:
    """NaN and Inf propagate as the DFT requires, and finite inputs give finite outputs.

    One NaN in the input makes every output NaN (each output is a sum with a non-zero
    coefficient on every input; a NaN in the real or imaginary part counts); one Inf makes
    every output non-finite. For irfft the non-finite value goes into the DC term, whose
    coefficient on every output is the real constant c. Common practice (IEEE Std 754-2019
    arithmetic: NaN absorbs every operation, Inf survives every product with a non-zero).
    """
    case = ctx.case
    x = ctx.random_input("nonfinite")
    y = ctx.output(ctx.run(x))
    problems: list[str] = []
    if not np.all(np.isfinite(y)):
        problems.append(f"a finite input gave {int(np.count_nonzero(~np.isfinite(y)))} NaN/Inf outputs")
    pos = 0 if case.kind == "irfft" else int(ctx.rng("nonfinite-position").integers(case.input_length))
    for bad_value, name in ((np.nan, "NaN"), (np.inf, "Inf")):
        xb = x.copy()
        xb[pos] = bad_value
        yb = ctx.run(xb)
        if yb.shape != (case.output_length,):
            problems.append(f"an input with one {name} gave an output of shape {yb.shape}")
            continue
        good = np.isnan(yb) if name == "NaN" else ~np.isfinite(yb)
        if not np.all(good):
            missed = int(np.count_nonzero(~good))
            want = "NaN" if name == "NaN" else "NaN or Inf"
            problems.append(f"one {name} at input {pos} left {missed} of {yb.size} outputs not {want}")
    if problems:
        return [ctx.row("nonfinite", "fail", diagnosis="nonfinite", eps=False, message="; ".join(problems))]
    return [ctx.row("nonfinite", "pass", eps=False,
                    message=f"finite input -> finite output; one NaN (input {pos}) -> all NaN; "
                            f"one Inf -> all non-finite")]


def check_strided(ctx: CheckContext) -> list[CheckRow]:
    """Non-contiguous (every second element of a bigger array) and negative-stride inputs give the
    same answer as the same values in a contiguous array.

    Bitwise equality is expected of most backends; two transforms of the same values within
    the accuracy limit of each other (S = both norms) pass too, since a backend may take a
    different code path for strided data. A difference is named by what differs: shape,
    dtype, or the values (with a test of whether the backend read memory in order,
    ignoring the strides).
    """
    case = ctx.case
    x = ctx.random_input("strided")
    filler = ctx.random_input("strided-filler")
    base = ctx.run(x)
    length = x.shape[0]
    big = np.empty(2 * length, dtype=x.dtype)
    big[::2], big[1::2] = x, filler
    rev = np.empty(length, dtype=x.dtype)
    rev[:] = x[::-1]
    big_rev = np.empty(2 * length, dtype=x.dtype)
    big_rev[::2], big_rev[1::2] = x[::-1], filler
    layouts = [
        ("every 2nd element", big[::2], big[:length]),
        ("negative stride", rev[::-1], rev),
        ("every 2nd element backwards", big_rev[::-1][1::2] if length else big_rev, None),
    ]
    notes = []
    for name, view, memory_order in layouts:
        if not np.array_equal(view, x):
            raise RuntimeError(f"internal: the {name} view does not hold the input values")
        out = ctx.run(view, copy_input=False)
        if out.shape != base.shape:
            return [ctx.row("strided", "fail", diagnosis="shape", eps=False,
                            message=f"{name}: output shape {out.shape}, contiguous input gives {base.shape}")]
        if out.dtype != base.dtype:
            return [ctx.row("strided", "fail", diagnosis="dtype", eps=False,
                            message=f"{name}: output dtype {out.dtype}, contiguous input gives {base.dtype}")]
        count, _ = _differences(base, out)
        if not count:
            continue
        value = _relative(out.astype(np.clongdouble) - base.astype(np.clongdouble), _norm(out) + _norm(base))
        if value <= ctx.limit + ctx.rounding:
            notes.append(f"{name}: within rounding ({_fmt_eps(value, case.dtype)}), not bitwise")
            continue
        code, why = "unknown", "the values differ"
        if memory_order is not None and length > 1:
            as_read = ctx.run(np.ascontiguousarray(memory_order))
            if as_read.shape == out.shape and _differences(as_read, out)[0] == 0:
                why = ("the output is the transform of the array's memory read in order: the backend ignores "
                       "the strides")
        if why == "the values differ":
            code, why = ctx.diagnose(x, out)
        return [ctx.row("strided", "fail", value, ctx.limit + ctx.rounding, diagnosis=code,
                        message=f"{name}: output differs from the contiguous input's by "
                                f"{_fmt_eps(value, case.dtype)}; {why}")]
    msg = "every 2nd element, negative stride and both: " + ("; ".join(notes) if notes else "bitwise equal")
    return [ctx.row("strided", "pass", eps=False, message=msg)]


def check_precision(ctx: CheckContext) -> list[CheckRow]:
    """The output's dtype is of the case's precision or higher (real for irfft, complex otherwise)."""
    case = ctx.case
    x = ctx.random_input("precision")
    try:
        with np.errstate(all="ignore"):
            out = ctx.plan.execute(np.array(x, copy=True))
    except Exception as exc:  # noqa: BLE001
        raise BackendFailure(f"the backend raised {type(exc).__name__}: {_one_line(exc)}") from None
    if not isinstance(out, np.ndarray):
        return [ctx.row("precision", "fail", diagnosis="dtype", eps=False,
                        message=f"output is a {type(out).__name__}, not a numpy array")]
    want = case.output_dtype
    got = out.dtype
    if got.kind not in "fc":
        return [ctx.row("precision", "fail", diagnosis="dtype", eps=False,
                        message=f"output dtype {got} is not floating-point; {want} is due")]
    if (got.kind == "c") != (want.kind == "c"):
        what = "a real" if got.kind == "f" else "a complex"
        return [ctx.row("precision", "fail", diagnosis="dtype", eps=False,
                        message=f"output dtype {got} is {what} type; {want} is due")]
    if float(np.finfo(got).eps) > float(np.finfo(want).eps):
        return [ctx.row("precision", "fail", diagnosis="dtype", eps=False,
                        message=f"output dtype {got} is of lower precision than the {want} asked for")]
    more = "" if got == want else f" (more than the {want} asked for)"
    return [ctx.row("precision", "pass", eps=False, message=f"output dtype {got}{more}")]


def check_shape(ctx: CheckContext) -> list[CheckRow]:
    """The output is 1-D with ``case.output_length`` values."""
    case = ctx.case
    out = ctx.run(ctx.random_input("shape"))
    if out.shape != (case.output_length,):
        return [ctx.row("shape", "fail", float(out.size), float(case.output_length), diagnosis="shape", eps=False,
                        message=f"output shape {out.shape} where ({case.output_length},) is due")]
    return [ctx.row("shape", "pass", float(out.size), float(case.output_length), eps=False,
                    message=f"output shape ({case.output_length},)")]


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
        return [ctx.row(name, "skip", message=reason)]
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            warnings.simplefilter("ignore", np.exceptions.ComplexWarning)
            return CHECKS[name](ctx)
    except OutputProblem as problem:
        return [ctx.row(name, "fail", diagnosis=problem.code, eps=False, message=problem.message)]
    except BackendFailure as exc:
        return [ctx.row(name, "error", eps=False, message=_one_line(exc))]
    except Exception as exc:  # noqa: BLE001 - one check's failure must not stop the others
        return [ctx.row(name, "error", eps=False,
                        message=f"the {name} check could not run: {type(exc).__name__}: {_one_line(exc)}")]


def check_case(backend: Backend, case: Case, seed: int, check_names: list[str] | None = None,
               reference_fn: Callable[[np.ndarray, Case], Any] = reference_transform) -> list[CheckRow]:
    """Plan ``case`` once and return the rows of the asked checks (all of :data:`CHECKS` by default).

    A case the backend does not claim gives ``skip`` rows; a plan that raises gives an
    ``error`` row for every asked check.

    Raises
    ------
    UsageError
        For a check name not in :data:`CHECKS`.
    """
    names = list(check_names) if check_names else list(CHECKS)
    unknown = [c for c in names if c not in CHECKS]
    if unknown:
        raise UsageError(f"unknown check {unknown[0]!r}; checks: {', '.join(CHECKS)}")

    def rows(status: str, message: str) -> list[CheckRow]:
        return [CheckRow(backend=backend.label, kind=case.kind, dtype=case.dtype, n=case.n, check=name,
                         status=status, message=message, norm=case.norm) for name in names]

    reason = backend.unsupported_reason(case)
    if reason is not None:
        return rows("skip", reason)
    try:
        plan = backend.plan(case)
    except Exception as exc:  # noqa: BLE001
        return rows("error", f"planning failed: {type(exc).__name__}: {_one_line(exc)}")
    ctx = CheckContext(backend, case, plan, seed, reference_fn=reference_fn)
    try:
        return [row for name in names for row in run_check(ctx, name)]
    finally:
        ctx.close()
        try:
            plan.close()
        except Exception:  # noqa: BLE001
            pass


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
