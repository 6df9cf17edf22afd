"""The checks that exist only for shaped cases: ``separability``, ``axis-handling``,
``batch-independence``, ``layout``, and the behaviour checks ``input-intact`` and ``shape``.

Each compares the backend with itself on derived cases (the N-D transform against successive
1-D ones, other axes, one batch row alone, other memory layouts) or with the ground truth of
the derived case. Two computed outputs of the same exact value, each within ``limit`` of it,
lie at most ``2 limit`` apart, plus rounding (the 1-D battery's ``rounding_allowance``).
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from fftgauge.harness.battery.behaviour_checks import mismatched
from fftgauge.harness.battery.context import SQRT2, OutputProblem, fmt_eps, norm2, relative
from fftgauge.harness.cases import Case
from fftgauge.harness.errors import BackendFailure
from fftgauge.harness.execution.crash import exception_text
from fftgauge.harness.rows import CheckRow
from fftgauge.harness.shapes.case import LAYOUTS, ShapeCase, family_kind, lay_out
from fftgauge.harness.shapes.context import ShapedContext
from fftgauge.harness.shapes.diagnosis import batch_row, diagnose_shaped, leak_words, probe_leak

#: ``separability`` runs 1-D plans line by line only up to this many lines per axis (a Python
#: loop); above it only the backend's batched one-axis transforms are used.
MAX_LINE_CALLS = 2048
#: Batch rows ``batch-independence`` compares with their own transform.
ROWS_COMPARED = 3


def pair_allowance(ctx: ShapedContext, other_limit: float | None = None) -> float:
    """Return how far apart (relative) two computed outputs of the same exact value may lie."""
    return ctx.limit + (ctx.limit if other_limit is None else other_limit) + ctx.rounding


# -- separability ------------------------------------------------------------------------------

def _pass_case(ctx: ShapedContext, kind: str, shape: tuple[int, ...], axis: int) -> ShapeCase:
    return ShapeCase(kind, ctx.case.dtype, shape, (axis,), "C", ctx.case.norm)


def _along(ctx: ShapedContext, values: np.ndarray, step: ShapeCase) -> tuple[np.ndarray, float, str]:
    """Return (the backend's 1-D transform of every line of ``values`` along ``step``'s axis,
    that transform's limit, how it was computed).

    Raises
    ------
    LookupError
        When the backend has neither the batched one-axis kind nor the 1-D kind (or too many lines).
    """
    x = ctx.as_input(values, step)
    plan, reason = ctx.derived(step)
    limit = ctx.limit_of(step)
    if plan is not None:
        return ctx.transform(x, plan, step, "C"), limit, "batched"
    line = Case(step.kind, step.dtype, step.lengths[0], step.norm)
    lplan, lreason = ctx.line_plan(line)
    if lplan is None:
        raise LookupError(f"{reason}; and 1-D: {lreason}")
    axis = step.axes_normalised[0]
    moved = np.moveaxis(x, axis, -1)
    if moved.size // max(1, moved.shape[-1]) > MAX_LINE_CALLS:
        raise LookupError(f"{reason}; and {moved.size // moved.shape[-1]} lines are too many to run one by one")
    out = np.zeros(moved.shape[:-1] + (step.output_shape[axis],), dtype=ctx.work_dtype)
    for index in np.ndindex(*moved.shape[:-1]):
        y = ctx.run(np.ascontiguousarray(moved[index]), lplan, "C")
        if y.shape != (out.shape[-1],):
            raise OutputProblem("shape", f"the 1-D {line.label()} gave shape {y.shape}")
        out[index] = y
    return np.moveaxis(out, -1, axis), limit, "1-D"


def check_separability(ctx: ShapedContext) -> list[CheckRow]:
    """The N-D output equals successive 1-D transforms along its axes by the same backend
    (its batched one-axis transforms, else its 1-D transform line by line): for the real
    forward kinds the real transform along the halved axis first, for the real inverse kinds
    last (Oppenheim & Schafer; Bracewell: the multidimensional DFT is separable). Tolerance:
    the N-D ``limit`` plus each pass's limit (sqrt(2) for the real kinds) plus rounding per pass."""
    case = ctx.case
    if len(case.axes) < 2:
        return [ctx.row("separability", "skip", message="a one-axis case is its own 1-D transform "
                                                         "(batch-independence compares it with the 1-D one)")]
    x = ctx.random_input("separability")
    raw = ctx.run(x)
    y = ctx.output(raw, x=x)
    axes = list(case.axes_normalised)
    direction = "ifft" if case.is_inverse else "fft"
    if case.base_kind == "irfft":
        steps = [(direction, a) for a in axes[:-1]] + [("irfft", axes[-1])]
    elif case.base_kind == "rfft":
        steps = [("rfft", axes[-1])] + [(direction, a) for a in reversed(axes[:-1])]
    else:
        steps = [(direction, a) for a in reversed(axes)]
    values, total, how, passes = x, 0.0, set(), []
    try:
        for kind, axis in steps:
            shape = case.shape if kind in ("rfft", "irfft") else tuple(values.shape)  # the pass's logical shape
            passes.append(_pass_case(ctx, kind, shape, axis))
            values, limit, used = _along(ctx, values, passes[-1])
            total += limit
            how.add(used)
    except LookupError as exc:
        return [ctx.row("separability", "skip", message=f"the backend has no 1-D transforms to compare with: {exc}")]
    g = SQRT2 if case.is_real else 1.0
    tol = ctx.limit + g * total + len(steps) * ctx.rounding
    value = relative(y - values, norm2(y))
    order = " then ".join(f"{k} along {a}" for k, a in steps)
    msg = f"{case.kind} vs {order} ({' and '.join(sorted(how))}): off by {fmt_eps(value, case.dtype)}"
    if np.isfinite(value) and value <= tol:
        return [ctx.row("separability", "pass", value, tol, message=msg)]
    found = ctx.random_diagnosis() or pass_fault(ctx, passes)
    return [ctx.row("separability", "fail", value, tol, diagnosis=found[0], message=f"{msg}; {found[1]}")]


def pass_fault(ctx: ShapedContext, passes: list[ShapeCase]) -> tuple[str, str]:
    """Return the diagnosis of the first batched one-axis pass that is wrong on a random input
    (the N-D transform itself being accurate), or ``unknown`` naming the 1-D transforms."""
    for step in passes:
        plan, _ = ctx.derived(step)
        if plan is None:
            continue
        x = ctx.random_input("separability-pass", step)
        y = ctx.run(x, plan, "C")
        try:
            err = ctx.error_of(x, y, step)
        except ValueError:
            err = float("inf")
        if not err <= ctx.limit_of(step):
            code, words = diagnose_shaped(ctx, x, y, step)
            return code, f"{ctx.case.kind} itself is accurate; its {step.kind} along axis {step.axes[0]} is wrong: {words}"
    return "unknown", f"{ctx.case.kind} itself is accurate, so the backend's 1-D transforms along the axes are at fault"


# -- axis handling --------------------------------------------------------------------------------

def axis_variants(case: ShapeCase) -> list[tuple[str, ShapeCase]]:
    """Return the derived cases ``axis-handling`` runs, each with what it tests: the same axes
    written negative (or non-negative), in reversed order (several axes), and the one-axis
    transform along each axis of the shape."""
    rank = len(case.shape)
    out = []
    flipped = tuple(a - rank if a >= 0 else a + rank for a in case.axes)
    out.append((f"axes {flipped} for {case.axes}", replace(case, axes=flipped, layout="C")))
    if len(case.axes) >= 2:
        out.append((f"axes in reverse order {tuple(reversed(case.axes))}",
                    replace(case, axes=tuple(reversed(case.axes)), layout="C")))
    one = family_kind(case.kind, 1)
    for axis in range(rank):
        if len(case.axes) == 1 and axis == case.axes_normalised[0]:
            continue
        out.append((f"{one} along axis {axis} alone", ShapeCase(one, case.dtype, case.shape, (axis,), "C", case.norm)))
    return out


def check_axis_handling(ctx: ShapedContext) -> list[CheckRow]:
    """Each derived axis choice (:func:`axis_variants`) gives what the reference says for it,
    within that case's limit; derived cases the backend does not claim are left out (the row
    says so). Value: the worst error over its limit's ratio; the row shows that case's error
    and limit."""
    x_cache: dict = {}
    results, unclaimed = [], []
    for what, variant in axis_variants(ctx.case):
        plan, reason = ctx.derived(variant)
        if plan is None:
            unclaimed.append(what)
            continue
        x = x_cache.get(variant.input_shape)
        if x is None:
            x = x_cache[variant.input_shape] = ctx.random_input("axis-handling", variant)
        raw = ctx.run(x, plan, "C")
        try:
            ctx.output(raw, variant, x)
            err = ctx.error_of(x, raw, variant)
        except OutputProblem as problem:
            results.append((float("inf"), what, variant, x, raw, problem.code, problem.message))
            continue
        results.append((err, what, variant, x, raw, None, None))
    if not results:
        return [ctx.row("axis-handling", "skip", message=f"the backend claims none of: {'; '.join(unclaimed)}")]
    limits = {id(r): ctx.limit_of(r[2]) for r in results}
    worst = max(results, key=lambda r: r[0] / limits[id(r)] if np.isfinite(r[0]) else float("inf"))
    err, what, variant, x, raw, code, words = worst
    limit = limits[id(worst)]
    left_out = f"; not claimed: {'; '.join(unclaimed)}" if unclaimed else ""
    msg = f"{len(results)} axis choices ({'; '.join(r[1] for r in results)}); worst {what}: {fmt_eps(err, ctx.case.dtype)}"
    if np.isfinite(err) and err <= limit:
        return [ctx.row("axis-handling", "pass", err, limit, message=msg + left_out)]
    if code is None:
        code, words = diagnose_shaped(ctx, x, raw, variant)
    return [ctx.row("axis-handling", "fail", err, limit, diagnosis=code, message=f"{msg}{left_out}; {words}")]


# -- batch independence ---------------------------------------------------------------------------

def _row_case(case: ShapeCase) -> ShapeCase:
    """Return the case of one batch row alone: the transformed axes only, in their order."""
    kept = sorted(case.axes_normalised)
    shape = tuple(case.shape[a] for a in kept)
    axes = tuple(kept.index(a) for a in case.axes_normalised)
    return ShapeCase(case.kind, case.dtype, shape, axes, "C", case.norm)


def _row_alone(ctx: ShapedContext, row_x: np.ndarray, row: ShapeCase) -> tuple[np.ndarray, float] | None:
    """Return the backend's transform of one row by itself (its 1-D transform for a one-axis
    kind when it has one, else the row's own shaped case) and that transform's limit."""
    if len(row.axes) == 1:
        line = Case(row.kind, row.dtype, row.lengths[0], row.norm)
        plan, _ = ctx.line_plan(line)
        if plan is not None:
            from fftgauge.harness.battery.bounds import accuracy_limit
            y = ctx.run(np.ascontiguousarray(row_x.reshape(-1)), plan, "C")
            return y.reshape(row.output_shape).astype(ctx.work_dtype), accuracy_limit(line)
    plan, _ = ctx.derived(row)
    if plan is None:
        return None
    return ctx.transform(np.ascontiguousarray(row_x), plan, row, "C"), ctx.limit_of(row)


def check_batch_independence(ctx: ShapedContext) -> list[CheckRow]:
    """Each row of a batch equals its own transform (the backend's 1-D one, or the row's own
    N-D one), within ``limit`` plus that transform's limit; and changing one row changes no
    other row's output (bitwise for a backend that claims bitwise reproducibility, else within
    the same allowance). A leak is ``batch-leak``."""
    case = ctx.case
    if case.batch < 2:
        return [ctx.row("batch-independence", "skip", message=f"{case.label()} is one transform, not a batch")]
    x = ctx.random_input("batch-independence")
    bitwise = getattr(ctx.capabilities, "bitwise_reproducible", True)
    allowed = 0.0 if bitwise else pair_allowance(ctx)
    leak = probe_leak(ctx, ctx.plan, case, x, allowed)
    if leak is not None:
        words = leak_words(*leak, case)
        found = ctx.random_diagnosis()
        if found is not None and found[0] in ("wrong-axis", "transposed"):  # the rows mix because of that
            return [ctx.row("batch-independence", "fail", leak[2], allowed, diagnosis=found[0],
                            message=f"{words}; because {found[1]}")]
        return [ctx.row("batch-independence", "fail", leak[2], allowed, diagnosis="batch-leak", message=words)]
    raw = ctx.run(x)
    y = ctx.output(raw, x=x)
    row = _row_case(case)
    picks = sorted({0, case.batch - 1, int(ctx.rng("batch-rows").integers(0, case.batch))})[:ROWS_COMPARED]
    worst, worst_row, tol = 0.0, None, None
    for position in picks:
        alone = _row_alone(ctx, x[batch_row(case, position, case.input_shape)], row)
        if alone is None:
            return [ctx.row("batch-independence", "pass", 0.0, allowed, message=(
                "changing one row changes no other row's output; the backend has no transform of one row "
                "alone to compare the rows with"))]
        values, limit = alone
        mine = y[batch_row(case, position, case.output_shape)]
        value = relative(mine - values, norm2(values))
        tol = pair_allowance(ctx, limit)
        if not value <= worst:
            worst, worst_row = value, position
    msg = (f"changing one row changes no other row's output{' (bitwise)' if bitwise else ''}; rows "
           f"{', '.join(map(str, picks))} vs their own transform: worst (row {worst_row}) {fmt_eps(worst, case.dtype)}")
    if np.isfinite(worst) and worst <= tol:
        return [ctx.row("batch-independence", "pass", worst, tol, message=msg)]
    found = ctx.random_diagnosis() or ("unknown", "the batch is transformed accurately, so the transform of one row "
                                                  "alone is at fault")
    return [ctx.row("batch-independence", "fail", worst, tol, diagnosis=found[0], message=f"{msg}; {found[1]}")]


# -- layout ------------------------------------------------------------------------------------------

def check_layout(ctx: ShapedContext) -> list[CheckRow]:
    """The same values laid out C-contiguous, Fortran-ordered, strided and reversed (negative
    strides) give the same answer through the same plan: a C case compares every other layout
    with C, any other case its own layout with C. Within ``2 limit`` plus rounding (bitwise
    agreement is noted); a difference is ``layout`` when one of the two is right."""
    case = ctx.case
    x = ctx.random_input("layout")
    y_c = ctx.output(ctx.run(x, layout="C"), x=x)
    others = [lay for lay in LAYOUTS if lay != "C"] if case.layout == "C" else [case.layout]
    tol = pair_allowance(ctx)
    worst = (0.0, others[0], None)
    same = []
    for layout in others:
        raw = ctx.run(x, layout=layout)
        y = ctx.output(raw, x=x)
        value = relative(y - y_c, norm2(y_c))
        if value == 0.0:
            same.append(layout)
        if not value <= worst[0]:
            worst = (value, layout, raw)
    value, layout, raw = worst
    msg = (f"{', '.join(others)} against C: worst {layout} off by {fmt_eps(value, case.dtype)}"
           + (f"; bitwise equal: {', '.join(same)}" if same else ""))
    if np.isfinite(value) and value <= tol:
        return [ctx.row("layout", "pass", value, tol, message=msg)]
    err_c, err_l = ctx.error_of(x, y_c), ctx.error_of(x, raw)
    if err_c <= ctx.limit or err_l <= ctx.limit:
        good, bad = ("C", layout) if err_c <= err_l else (layout, "C")
        words = (f"right for a {good} input, wrong for the same values laid out {bad} (errors {err_c:.3g} for C, "
                 f"{err_l:.3g} for {layout}): the backend mishandles that memory layout (its strides or order)")
        return [ctx.row("layout", "fail", value, tol, diagnosis="layout", message=f"{msg}; {words}")]
    code, words = ctx.diagnose_failure(x, raw)
    return [ctx.row("layout", "fail", value, tol, diagnosis=code, message=f"{msg}; wrong for every layout: {words}")]


# -- behaviour -----------------------------------------------------------------------------------------

def check_input_intact(ctx: ShapedContext) -> list[CheckRow]:
    """The caller's input array, in the case's layout, is left unchanged (unless the backend
    declares ``in_place``)."""
    x = lay_out(ctx.random_input("input-intact"), ctx.case.layout)
    keep = np.array(x, copy=True)
    try:
        with np.errstate(all="ignore"):
            ctx.plan.execute(x)
    except Exception as exc:  # noqa: BLE001
        raise BackendFailure(f"the backend raised {exception_text(exc)}") from None
    changed = int(np.count_nonzero(mismatched(keep, x)))
    if not changed:
        return [ctx.row("input-intact", "pass", eps=False, message="the input array is unchanged")]
    what = f"the backend changed {changed} of {x.size} input values ({ctx.case.layout} layout)"
    if ctx.capabilities.in_place:
        return [ctx.row("input-intact", "pass", float(changed), eps=False, message=f"{what}, which it declares (in_place)")]
    return [ctx.row("input-intact", "fail", float(changed), 0.0, diagnosis="input-modified", eps=False,
                    message=f"{what}; it does not declare in_place")]


def check_shape(ctx: ShapedContext) -> list[CheckRow]:
    """The output has the case's output shape and a dtype of at least the case's precision
    (real for the real inverse kinds, complex otherwise); a wrong shape is ``shape`` (or
    ``transposed``/``wrong-axis`` when the output is that transform), a lower precision ``dtype``."""
    case = ctx.case
    x = ctx.random_input("shape")
    raw = ctx.run(x)
    try:
        ctx.output(raw, x=x)
    except OutputProblem as problem:
        return [ctx.row("shape", "fail", diagnosis=problem.code, eps=False, message=problem.message)]
    if float(np.finfo(raw.dtype).eps) > float(np.finfo(case.output_dtype).eps):
        return [ctx.row("shape", "fail", diagnosis="dtype", eps=False,
                        message=f"output has dtype {raw.dtype}, lower precision than the {case.output_dtype} asked for")]
    kind = "real" if raw.dtype.kind == "f" else "complex"
    return [ctx.row("shape", "pass", eps=False, message=f"output shape {raw.shape}, {kind} dtype {raw.dtype}")]
