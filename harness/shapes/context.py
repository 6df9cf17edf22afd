"""The shaped check context: what every check of one shaped case shares (the backend, the plan,
the seed, the ground truth, the accuracy limit), and the array helpers the checks use.

:class:`ShapedContext` is the N-D sibling of
:class:`fftgauge.harness.battery.context.CheckContext`: it draws the inputs (the same for
every backend and every layout), lays them out in memory as the case's ``layout`` says and
runs the backend (turning what it raises into
:class:`~fftgauge.harness.errors.BackendFailure` and what it returns into a checked array),
plans the derived cases some checks need (the companion inverse, one axis alone, the axes
permuted, another layout, the 1-D transform), makes rows and diagnoses failures
(:mod:`fftgauge.harness.shapes.diagnosis`). The measures (:func:`norm2`, :func:`relative`,
...) are the 1-D battery's own.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field
from typing import Any, Callable

import numpy as np

from fftgauge.backends.base import Backend, Plan
from fftgauge.harness.battery import bounds
from fftgauge.harness.battery.context import finite_or_none, norm2, ratio
from fftgauge.harness.battery.context_base import (
    ContextBase, OutputProblem, execute_plan, require_numbers,
)
from fftgauge.harness.cases import Case
from fftgauge.harness.dft import norm_factor
from fftgauge.harness.rows import CheckRow
from fftgauge.harness.shapes.case import ShapeCase, lay_out
from fftgauge.harness.shapes.fields import row_fields

__all__ = ["COMPANION_KIND", "ShapedContext", "clean_half", "reverse_axes", "shaped_row"]

#: The inverse of each shaped kind (round trip and convolution pair them).
COMPANION_KIND = {"fft": "ifft", "ifft": "fft", "rfft": "irfft", "irfft": "rfft",
                  "fftn": "ifftn", "ifftn": "fftn", "rfftn": "irfftn", "irfftn": "rfftn"}


def reverse_axes(a: np.ndarray, axes: tuple[int, ...]) -> np.ndarray:
    """Return ``a[-k]`` along each of ``axes`` (index ``k`` taken to ``(-k) mod n``): the index
    reversal of the DFT's symmetry relations."""
    out = a
    for axis in axes:
        out = np.roll(np.flip(out, axis), 1, axis)
    return out


def clean_half(x: np.ndarray, case: ShapeCase) -> np.ndarray:
    """Return the half spectrum ``x`` (input of an ``irfft``/``irfftn`` case) made consistent:
    its planes at bin 0 and (even length) bin N/2 of the halved axis obey
    ``X[-k] = conj X[k]`` over the other transformed axes, as the half spectrum of a real
    array must (the N-D form of :func:`fftgauge.harness.dft.clean_half_spectrum`)."""
    x = np.array(x, copy=True)
    axis = case.halved_axis
    n = case.shape[axis]
    others = tuple(a for a in case.axes_normalised if a != axis)
    for j in sorted({0, n // 2} if n % 2 == 0 else {0}):
        index = [slice(None)] * x.ndim
        index[axis] = slice(j, j + 1)
        plane = x[tuple(index)]
        x[tuple(index)] = (plane + np.conj(reverse_axes(plane, others))) / 2
    return x


def shaped_row(label: str, case: ShapeCase, check: str, status: str, **fields: Any) -> CheckRow:
    """Return a row of the shaped ``case``: ``n`` is N (points of one transform) and the
    shaped fields (``shape``, ``axes``, ``layout``, ``batch``, ``points``) are filled in."""
    return CheckRow(backend=label, kind=case.kind, dtype=case.dtype, n=case.points, check=check, status=status,
                    norm=case.norm, **row_fields(case), **fields)


def _stable_hash(text: str) -> int:
    return int.from_bytes(hashlib.blake2b(text.encode(), digest_size=8).digest(), "little")


@dataclass
class ShapedContext(ContextBase):
    """Everything a check needs for one shaped case of one backend.

    ``reference_fn(x, case) -> Reference`` is the ground truth
    (:func:`fftgauge.harness.shapes.reference.shaped_reference` by default) and ``limit_fn(case)``
    the relative 2-norm error limit of one transform
    (:func:`fftgauge.harness.shapes.bounds.shaped_limit` by default).
    """

    backend: Backend
    case: ShapeCase
    plan: Plan
    seed: int
    reference_fn: Callable[[np.ndarray, ShapeCase], Any] | None = None
    limit_fn: Callable[[ShapeCase], float] | None = None
    limit: float | None = None
    _plans: dict = field(default_factory=dict, repr=False)
    _diagnosis: tuple[str, str] | None = field(default=None, repr=False)

    def __post_init__(self) -> None:
        if self.reference_fn is None:
            from fftgauge.harness.shapes.reference import shaped_reference
            self.reference_fn = shaped_reference
        if self.limit_fn is None:
            from fftgauge.harness.shapes.bounds import shaped_limit
            self.limit_fn = shaped_limit
        if self.limit is None:
            self.limit = float(self.limit_fn(self.case))

    # -- what the case is (label, capabilities, unit_roundoff, rounding, work_dtype: ContextBase)
    def scale(self, case: ShapeCase | None = None) -> Any:
        """The normalisation factor of ``case`` (default: this one), the product over its axes,
        in the work precision (long double for long double cases)."""
        case = case or self.case
        if self.work_dtype == np.dtype(np.clongdouble):
            return norm_factor(case.points, case.norm, case.is_inverse, np.longdouble, np.sqrt)
        return float(norm_factor(case.points, case.norm, case.is_inverse))

    def limit_of(self, case: ShapeCase) -> float:
        """The accuracy limit of another shaped case."""
        return self.limit if case == self.case else float(self.limit_fn(case))

    # -- inputs -------------------------------------------------------------------------------
    def rng(self, purpose: str, case: ShapeCase | None = None) -> np.random.Generator:
        """Return the generator for ``purpose``: it depends on the seed, the case (not its
        layout) and the purpose alone, so every backend and every layout sees the same inputs."""
        case = case or self.case
        key = f"{case.kind}|{case.dtype}|{case.shape}|{case.axes}|{case.norm}|{purpose}"
        return np.random.default_rng([int(self.seed), _stable_hash(key)])

    def random_input(self, purpose: str, case: ShapeCase | None = None, distribution: str = "gaussian") -> np.ndarray:
        """Return a random input of ``case`` (default: this one), C-ordered, in its input dtype.

        Gaussian (or uniform on [-1, 1)) real and imaginary parts; for the real inverse kinds a
        valid half spectrum (:func:`clean_half`).
        """
        case = case or self.case
        rng = self.rng(purpose, case)
        draw = rng.standard_normal if distribution == "gaussian" else (lambda size: rng.uniform(-1, 1, size))
        shape = case.input_shape
        values = draw(shape) if case.input_dtype.kind == "f" else draw(shape) + 1j * draw(shape)
        return self.as_input(values, case)

    def as_input(self, values: np.ndarray, case: ShapeCase | None = None) -> np.ndarray:
        """Return ``values`` rounded to the input dtype of ``case`` (real part for a real input),
        C-ordered; a half spectrum made consistent (:func:`clean_half`)."""
        case = case or self.case
        values = np.asarray(values)
        if case.input_dtype.kind == "f":
            values = np.real(values)
        x = np.ascontiguousarray(values.astype(case.input_dtype))
        return np.ascontiguousarray(clean_half(x, case)) if case.base_kind == "irfft" else x

    # -- running the backend ------------------------------------------------------------------
    def run(self, x: np.ndarray, plan: Plan | None = None, layout: str | None = None) -> np.ndarray:
        """Return a copy of ``plan.execute`` (default: the case's plan) of a copy of ``x`` laid
        out as ``layout`` (default: the case's), as an ndarray.

        Raises
        ------
        BackendFailure
            When the backend raises.
        OutputProblem
            When it returns something that is not an array of numbers.
        """
        return execute_plan(plan or self.plan, lay_out(np.array(x, copy=True), layout or self.case.layout))

    def output(self, y: np.ndarray, case: ShapeCase | None = None, x: np.ndarray | None = None) -> np.ndarray:
        """Return ``y`` as a work-precision complex array after checking its dtype and shape.

        Raises
        ------
        OutputProblem
            ``dtype`` for an output that is not floating-point; for a wrong shape the code the
            shape diagnosis finds (``shape``, or ``transposed``/``wrong-axis`` when ``x`` is
            given and the output is the transposed or other-axis transform of it).
        """
        case = case or self.case
        require_numbers(y)
        if y.shape != case.output_shape:
            from fftgauge.harness.shapes.diagnosis import diagnose_shape
            code, words = diagnose_shape(case, x, y, self.reference_fn)
            raise OutputProblem(code, words)
        return y.astype(self.work_dtype)

    def transform(self, x: np.ndarray, plan: Plan | None = None, case: ShapeCase | None = None,
                  layout: str | None = None) -> np.ndarray:
        """Return the checked output of ``x`` (see :meth:`run` and :meth:`output`)."""
        return self.output(self.run(x, plan, layout), case, x)

    def reference(self, x: np.ndarray, case: ShapeCase | None = None) -> np.ndarray:
        """Return the ground truth of ``x`` for ``case`` (default: this one) in the work precision."""
        ref = self.reference_fn(x, case or self.case)
        return (ref.hi.astype(self.work_dtype) + ref.lo.astype(self.work_dtype))

    def error_of(self, x: np.ndarray, y: np.ndarray, case: ShapeCase | None = None) -> float:
        """Return the relative 2-norm error of the output ``y`` for ``x`` against the ground truth."""
        ref = self.reference_fn(x, case or self.case)
        return ratio(norm2(ref.error(np.asarray(y))), norm2(ref.hi))

    # -- derived plans --------------------------------------------------------------------------
    def derived(self, case: ShapeCase) -> tuple[Plan | None, str | None]:
        """Return ``(plan, None)`` for another shaped case of this backend, or ``(None, reason)``
        when the backend does not claim it; plans are kept and closed by :meth:`close`.

        Raises
        ------
        BackendFailure
            When planning it raises.
        """
        if case == self.case:
            return self.plan, None
        return self.cached_plan(self._plans, case, self.backend.shaped_unsupported_reason, self.backend.plan_shaped,
                                case.label())

    def line_plan(self, line: Case) -> tuple[Plan | None, str | None]:
        """Return ``(plan, None)`` for the backend's 1-D transform ``line``, or ``(None, reason)``.

        Raises
        ------
        BackendFailure
            When planning it raises.
        """
        return self.cached_plan(self._plans, line, self.backend.unsupported_reason, self.backend.plan,
                                f"1-D {line.label()}")

    def companion(self) -> tuple[Plan | None, ShapeCase, str | None]:
        """Return ``(plan, case, reason)`` for the inverse kind of this case (plan None: not claimed)."""
        from dataclasses import replace
        comp = replace(self.case, kind=COMPANION_KIND[self.case.kind])
        plan, reason = self.derived(comp)
        return plan, comp, reason

    # -- verdicts ---------------------------------------------------------------------------------
    def row(self, check: str, status: str, value: float | None = None, limit: float | None = None,
            diagnosis: str | None = None, message: str = "", eps: bool = True,
            reference: str | None = None) -> CheckRow:
        """Return one row of this case; ``eps_units`` from ``value`` when ``eps`` is True."""
        value = finite_or_none(None if value is None else float(value))  # plain floats (long double values too)
        limit = None if limit is None else float(limit)
        eps_units = bounds.eps_units(value, self.case.dtype) if (eps and value is not None) else None
        return shaped_row(self.label, self.case, check, status, value=value, limit=limit, eps_units=eps_units,
                          diagnosis=diagnosis if status == "fail" else None, message=message,
                          reference=reference, limit_source="bound" if limit is not None else None)

    def find_diagnosis(self, x: np.ndarray, y: np.ndarray) -> tuple[str, str]:
        """Return :func:`fftgauge.harness.shapes.diagnosis.diagnose_shaped` of the output ``y``
        for ``x`` (see :meth:`ContextBase.diagnose`, which turns a diagnosis that fails into ``unknown``)."""
        from fftgauge.harness.shapes.diagnosis import diagnose_shaped
        return diagnose_shaped(self, x, y)

    def random_error(self, x: np.ndarray, y: np.ndarray) -> float:
        """Return the relative 2-norm error of the output ``y`` for the random input ``x`` (:meth:`error_of`)."""
        return self.error_of(x, y)
