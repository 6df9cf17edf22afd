"""Diagnosis of a wrong shaped output: which bug of batched and N-D code explains it.

The 1-D battery's approach (:mod:`fftgauge.harness.battery.diagnosis`) carried to arrays: a
hypothesis is a *candidate* output built from the ground truth by the change a bug makes, and
it matches when the output equals it up to one constant (least squares) to within
:data:`~fftgauge.harness.battery.diagnosis.MATCH_RELATIVE`. Two hypotheses are experiments on
the backend instead (they need more than one output): a batch leak and a layout bug. The codes
of this module, beside the contract's, in the order they are tried:

=============== ==========================================================================
code            what is found
=============== ==========================================================================
dtype, shape    output not floating-point, or of a wrong shape that ``transposed`` or
                ``wrong-axis`` (tested first on such an output) does not explain
nonfinite       NaN or Inf in the output of a finite input
layout          (experiment) the same values laid out C-contiguous give the right answer, the
                case's layout (Fortran, strided, reversed) a wrong one
transposed      output equals the right one with its axes transposed (a Fortran-order
                result handed back as C, or the axes written in reverse)
wrong-axis      output equals the transform along (over) other axes than the ones asked
batch-leak      (experiment) changing one row of the batch changes the output of other rows
scale           output equals the right one times a constant (N, 1/N, sqrt(N), ... of the
                whole array or of one axis)
sign            output equals the opposite-sign transform (``X[-k]`` over the axes)
hermitian-half  a real N-D inverse that inverts the halved axis first, as if every line
                along it were a Hermitian half spectrum by itself: the other axes' half of
                the symmetry is dropped
precision       right structure, errors at the level of a lower precision
unknown         none of the above
=============== ==========================================================================

``batch-leak`` and ``layout`` are also found directly by the ``batch-independence`` and
``layout`` checks (:mod:`fftgauge.harness.shapes.structure_checks`), whose evidence is exactly
the experiment.
"""

from __future__ import annotations

import itertools
from typing import TYPE_CHECKING, Any

import numpy as np

from fftgauge.harness.battery.diagnosis import (
    MATCH_RELATIVE, PRECISION_HIGH_FACTOR, PRECISION_LOW_UNITS, UNIT_FACTOR_RELATIVE, factor_name,
)
from fftgauge.harness.dft import machine_epsilon, unit_roundoff
from fftgauge.harness.errors import BackendFailure
from fftgauge.harness.shapes.case import ShapeCase, family_kind
from fftgauge.harness.shapes.context import reverse_axes

if TYPE_CHECKING:
    from fftgauge.harness.shapes.context import ShapedContext

__all__ = ["SHAPED_CODES", "batch_row", "diagnose_shape", "diagnose_shaped", "fit", "leak_words", "probe_leak"]

#: The diagnosis codes of shaped cases beyond the contract's vocabulary, with their meaning.
SHAPED_CODES = {
    "wrong-axis": "the transform runs along (over) other axes than the ones asked for",
    "transposed": "the output is the right one with its axes transposed",
    "batch-leak": "the rows of a batch leak into each other: changing one row changes another's output",
    "layout": "right for one memory layout of the input (C order), wrong for another (Fortran, strided, reversed)",
    "hermitian-half": "a real N-D inverse drops the Hermitian half of one axis (inverts the halved axis first)",
}

_LOWER = {"float32": ("float16",), "float64": ("float32",), "longdouble": ("float64", "float32")}


def _norm(v: np.ndarray) -> float:
    return float(np.sqrt(np.sum(np.abs(np.asarray(v, dtype=np.complex128)) ** 2))) if np.size(v) else 0.0


def fit(candidate: np.ndarray, y: np.ndarray) -> tuple[complex, float]:
    """Return ``(a, r)``: the least-squares constant with ``y ~ a candidate`` and the relative
    residual ``norm(y - a c) / norm(a c)`` (``inf`` for a zero candidate or other shapes)."""
    c = np.asarray(candidate, dtype=np.complex128).ravel()
    v = np.asarray(y, dtype=np.complex128).ravel()
    if c.shape != v.shape:
        return 0j, float("inf")
    cc = float(np.vdot(c, c).real)
    if cc == 0.0 or not np.isfinite(cc):
        return 0j, float("inf")
    a = complex(np.vdot(c, v) / cc)
    denom = _norm(a * c)
    return a, (_norm(v - a * c) / denom if denom else float("inf"))


def _with_factor(words: str, a: complex, n: int) -> str:
    if abs(a - 1) <= UNIT_FACTOR_RELATIVE:
        return words
    if abs(a.imag) <= UNIT_FACTOR_RELATIVE * abs(a) and a.real > 0:
        return f"{words}, and scaled by {factor_name(a.real, n)}"
    return f"{words}, and multiplied by {a:.4g}"


def _axes_words(axes: tuple[int, ...]) -> str:
    return f"axis {axes[0]}" if len(axes) == 1 else f"axes {','.join(map(str, axes))}"


def _reference(reference_fn: Any, x: np.ndarray, case: ShapeCase) -> np.ndarray:
    ref = reference_fn(x, case)
    return np.asarray(ref.hi, dtype=np.complex128) + np.asarray(ref.lo, dtype=np.complex128)


def _transposes(case: ShapeCase) -> list[tuple[int, ...]]:
    """Return the axis orders a transposed output may have: every permutation of the array's
    axes but the identity (rank <= 4), the full reversal first."""
    rank = len(case.shape)
    if rank < 2:
        return []
    perms = [tuple(reversed(range(rank)))]
    if rank <= 4:
        perms += [p for p in itertools.permutations(range(rank)) if p != tuple(range(rank)) and p not in perms]
    return perms


def _other_axes(case: ShapeCase) -> list[ShapeCase]:
    """Return the cases of the same kind family over other axes of the shape (same count)."""
    rank = len(case.shape)
    own = case.axes_normalised
    out = []
    for axes in itertools.permutations(range(rank), len(own)):
        if axes == own or (not case.is_real and set(axes) == set(own)):
            continue
        out.append(ShapeCase(case.kind, case.dtype, case.shape, axes, "C", case.norm))
    return out


def structural_match(reference_fn: Any, x: np.ndarray | None, y: np.ndarray, case: ShapeCase,
                     truth: np.ndarray | None) -> tuple[str, str] | None:
    """Return ``(code, words)`` when ``y`` is the transposed or other-axis transform of ``x``,
    else None (``truth``: the right output, when its shape is the case's)."""
    if x is None or x.shape != case.input_shape:
        return None
    if truth is not None:
        for perm in _transposes(case):
            cand = np.transpose(truth, perm)
            a, r = fit(cand, y)
            if r <= MATCH_RELATIVE:
                return "transposed", _with_factor(
                    f"output is the right answer with its axes transposed (order {perm}, output shape "
                    f"{y.shape} where {case.output_shape} is due)", a, case.points)
    for other in _other_axes(case):
        if other.output_shape != y.shape or other.input_shape != x.shape:
            continue
        a, r = fit(_reference(reference_fn, x, other), y)
        if r <= MATCH_RELATIVE:
            return "wrong-axis", _with_factor(
                f"output is the transform along {_axes_words(other.axes)} where {_axes_words(case.axes)} "
                f"was asked for", a, case.points)
    return None


def diagnose_shape(case: ShapeCase, x: np.ndarray | None, y: np.ndarray, reference_fn: Any) -> tuple[str, str]:
    """Return ``(code, words)`` for an output ``y`` of the wrong shape: ``transposed`` or
    ``wrong-axis`` when ``y`` is that transform of ``x``, else ``shape``."""
    truth = _reference(reference_fn, x, case) if x is not None and x.shape == case.input_shape else None
    try:
        found = structural_match(reference_fn, x, np.asarray(y), case, truth)
    except ValueError:
        found = None
    if found is not None:
        return found
    return "shape", f"output has shape {tuple(np.shape(y))} where {case.output_shape} is due"


# -- experiments on the backend -----------------------------------------------------------------

def batch_row(case: ShapeCase, position: int, shape: tuple[int, ...]) -> tuple:
    """Return the index of batch row number ``position`` (C order over the batch axes) into an
    array of ``shape``: that position on every batch axis, everything along the transformed ones."""
    batch_axes = [a for a in range(len(shape)) if a not in case.axes_normalised]
    coords = np.unravel_index(position, [shape[a] for a in batch_axes]) if batch_axes else ()
    index: list[Any] = [slice(None)] * len(shape)
    for axis, c in zip(batch_axes, coords):
        index[axis] = int(c)
    return tuple(index)


def leak_words(row: int, changed_rows: list[int], change: float, case: ShapeCase) -> str:
    """Return the plain words of a leak: changing batch row ``row`` changed ``changed_rows``."""
    shown = ", ".join(map(str, changed_rows[:6])) + (", ..." if len(changed_rows) > 6 else "")
    return (f"changing batch row {row} (of {case.batch}) changed the output of {len(changed_rows)} other row"
            f"{'s' if len(changed_rows) != 1 else ''} ({shown}), by up to {change:.3g} of their norm: the "
            f"rows of the batch leak into each other")


def probe_leak(ctx: "ShapedContext", plan: Any, case: ShapeCase, x: np.ndarray, allowed: float
               ) -> tuple[int, list[int], float] | None:
    """Change one batch row of ``x`` (the middle one) and return ``(row, other rows whose output
    changed, worst relative change)`` when some other row's output moved by more than
    ``allowed`` of its norm, else None. Needs ``case.batch >= 2``."""
    row = case.batch // 2
    index = batch_row(case, row, case.input_shape)
    x2 = np.array(x, copy=True)
    bump = ctx.random_input("batch-leak-bump", case)
    x2[index] = bump[index]
    x2 = ctx.as_input(x2, case)
    y1, y2 = ctx.run(x, plan, case.layout), ctx.run(x2, plan, case.layout)
    if y1.shape != case.output_shape or y2.shape != case.output_shape:
        return None
    changed, worst = [], 0.0
    for other in range(case.batch):
        if other == row:
            continue
        oi = batch_row(case, other, case.output_shape)
        base = _norm(y1[oi])
        delta = _norm(np.asarray(y2[oi], dtype=np.complex128) - np.asarray(y1[oi], dtype=np.complex128))
        rel = delta / base if base else (0.0 if delta == 0 else float("inf"))
        if rel > allowed:
            changed.append(other)
            worst = max(worst, rel)
    return (row, changed, worst) if changed else None


def _experiments(ctx: "ShapedContext", x: np.ndarray, case: ShapeCase, which: str) -> tuple[str, str] | None:
    """Return ``layout`` (``which`` = "layout") or ``batch-leak`` (``which`` = "leak") when that
    experiment on the backend shows it."""
    try:
        plan, _ = ctx.derived(case)
        if plan is None:
            return None
        limit = ctx.limit_of(case)
        if which == "layout" and case.layout != "C":
            err_c = ctx.error_of(x, ctx.run(x, plan, "C"), case)
            err_l = ctx.error_of(x, ctx.run(x, plan, case.layout), case)
            if np.isfinite(err_c) and err_c <= limit and not err_l <= limit:
                return "layout", (f"right for a C-ordered input ({err_c:.3g} relative error), wrong for the same "
                                  f"values laid out {case.layout} ({err_l:.3g}): the backend mishandles that "
                                  f"memory layout (its strides or order)")
        if which == "leak" and case.batch >= 2:
            found = probe_leak(ctx, plan, case, x, 2 * limit + ctx.rounding)
            if found is not None:
                return "batch-leak", leak_words(*found, case)
    except (BackendFailure, ValueError):
        return None
    return None


# -- the entry point ---------------------------------------------------------------------------

def _hermitian_half_candidate(ctx: "ShapedContext", x: np.ndarray, case: ShapeCase) -> np.ndarray | None:
    """Return the output of a real N-D inverse that inverts the halved axis first (each line a
    Hermitian half by itself), then the other axes, keeping the real part."""
    if case.base_kind != "irfft" or len(case.axes) < 2:
        return None
    last = case.halved_axis
    line = ShapeCase("irfft", case.dtype, case.shape, (last,), "C", case.norm)
    a = _reference(ctx.reference_fn, x, line)
    others = tuple(ax for ax in case.axes_normalised if ax != last)
    rest = ShapeCase(family_kind("ifft", len(others)), case.dtype, case.shape, others, "C", case.norm)
    return _reference(ctx.reference_fn, a.astype(case.complex_dtype), rest).real


def _precision_level(case: ShapeCase, err: float, limit: float) -> str | None:
    for lower in _LOWER.get(case.dtype, ()):
        high = PRECISION_HIGH_FACTOR * limit * machine_epsilon(lower) / machine_epsilon(case.dtype)
        if PRECISION_LOW_UNITS * unit_roundoff(lower) <= err <= high:
            return lower
    return None


def diagnose_shaped(ctx: "ShapedContext", x: np.ndarray, y: Any, case: ShapeCase | None = None) -> tuple[str, str]:
    """Return the most likely bug behind a wrong shaped output, as ``(code, words)``.

    ``x`` is the input (C-ordered values) and ``y`` what the backend returned for it, for
    ``case`` (default: the context's). The codes and their order are the module's table.

    Raises
    ------
    Whatever the reference raises for an ``x`` of the wrong shape; a wrong ``y`` never raises.
    """
    case = case or ctx.case
    x = np.asarray(x)
    try:
        y = np.asarray(y)
    except Exception:  # noqa: BLE001
        return "dtype", f"output is a {type(y).__name__}, not an array of numbers"
    if y.dtype.kind not in "fc":
        return "dtype", f"output has dtype {y.dtype}, not a floating-point or complex type"
    if y.shape != case.output_shape:
        return diagnose_shape(case, x, y, ctx.reference_fn)
    if np.all(np.isfinite(x)) and not np.all(np.isfinite(y)):
        bad = int(np.count_nonzero(~np.isfinite(y)))
        return "nonfinite", f"output has {bad} NaN/Inf value{'s' if bad != 1 else ''} for a finite input"
    found = _experiments(ctx, x, case, "layout")
    if found is not None:
        return found
    truth = _reference(ctx.reference_fn, x, case)
    truth_norm = _norm(truth)
    if truth_norm == 0.0:
        return "unknown", "the exact transform of this input is zero, and the output is not"
    err = _norm(np.asarray(y, dtype=np.complex128) - truth) / truth_norm
    found = structural_match(ctx.reference_fn, x, y, case, truth) or _experiments(ctx, x, case, "leak")
    if found is not None:
        return found
    a, r = fit(truth, y)
    if r <= MATCH_RELATIVE and r * 4 < err:
        if abs(a.imag) <= UNIT_FACTOR_RELATIVE * abs(a) and a.real > 0:
            big = a.real > 1
            name = factor_name(a.real if big else 1 / a.real, case.points)
            words = f"output is {name} times too {'large' if big else 'small'} (N = {case.points})"
            for n in case.lengths:
                if name == factor_name(n if big else 1 / n, n) and n != case.points:
                    words += f"; {name} is the length of one axis ({n}): one axis's normalisation is off"
                    break
            return "scale", words
        return "scale", f"output is off by a constant factor {a:.4g}"
    if not case.is_real:
        a, r = fit(reverse_axes(truth, case.axes_normalised), y)
        if r <= MATCH_RELATIVE and r * 4 < err:
            return "sign", _with_factor("output is the opposite-sign transform (X[-k] over the axes): the "
                                        "exponent's sign is flipped", a, case.points)
    cand = _hermitian_half_candidate(ctx, x, case)
    if cand is not None:
        a, r = fit(cand, y)
        if r <= MATCH_RELATIVE and r * 4 < err:
            return "hermitian-half", _with_factor(
                f"output is what inverting the halved axis {case.axes[-1]} first gives, as if every line along "
                f"it were a Hermitian half spectrum by itself: the half of the symmetry across the other axes "
                f"is dropped", a, case.points)
    level = _precision_level(case, err, ctx.limit_of(case))
    units = err / machine_epsilon(case.dtype)
    if level is not None:
        return "precision", (f"errors at the level of {level}: relative rms error {units:.3g} eps of {case.dtype}; "
                             f"the transform appears to be computed in {level}")
    return "unknown", (f"relative rms error {err:.3g} ({units:.3g} eps); no common bug of batched or N-D code "
                       f"(wrong axis, transposed output, batch leak, layout, scale, sign) explains it")
