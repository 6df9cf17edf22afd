"""The behaviour checks: what a backend does besides computing values. ``input-intact``,
``repeatable``, ``concurrent`` (threads at once), ``nonfinite`` (NaN/Inf propagation),
``strided`` (memory layouts), ``precision`` (output dtype) and ``shape``.
"""

from __future__ import annotations

import threading
from typing import Any

import numpy as np

from fftgauge.harness.battery.context import (
    CheckContext, copy_output, finite_or_none, fmt_eps, norm2, relative,
)
from fftgauge.harness.battery.aliasing import kept_output_change, reuse_allowed
from fftgauge.harness.battery.thread_crew import CREW_SIZE, thread_caps, thread_caps_applied, thread_crew
from fftgauge.harness.errors import BackendFailure
from fftgauge.harness.execution.crash import exception_text
from fftgauge.harness.rows import CheckRow

#: Threads the ``concurrent`` check runs at once, and calls each thread makes per plan.
CONCURRENT_THREADS = CREW_SIZE
CONCURRENT_ROUNDS = 3

#: Seconds a thread of the ``concurrent`` check may take for its calls before the check fails.
CONCURRENT_TIMEOUT_SECONDS = 120.0

#: A concurrent call may differ from the same call alone by this many times the backend's
#: run-to-run spread (measured on a few sequential repeats, so with a margin) before the
#: difference can count as thread-unsafety.
SPREAD_FACTOR = 2.0


# -- behaviour -------------------------------------------------------------------------------------

def check_input_intact(ctx: CheckContext) -> list[CheckRow]:
    """The caller's input array is left unchanged (unless the backend declares ``in_place``).

    The input is in the backend's declared convention (the array it is handed itself).
    """
    x = ctx.native_input(ctx.random_input("input-intact"))
    keep = x.copy()
    ctx.run_native(x, copy_input=False)
    changed = int(np.count_nonzero(mismatched(keep, x)))
    if not changed:
        return [ctx.row("input-intact", "pass", eps=False, message="the input array is unchanged")]
    what = f"the backend changed {changed} of {x.shape[0]} input values"
    if ctx.capabilities.in_place:
        return [ctx.row("input-intact", "pass", float(changed), eps=False,
                        message=f"{what}, which it declares (in_place)")]
    return [ctx.row("input-intact", "fail", float(changed), 0.0, diagnosis="input-modified", eps=False,
                    message=f"{what}; it does not declare in_place")]


def mismatched(a: np.ndarray, b: np.ndarray) -> np.ndarray:
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


def same_bytes(a: np.ndarray, b: np.ndarray) -> bool:
    """Return True when ``a`` and ``b`` (same shape and dtype) hold identical bytes.

    Identical bytes are identical values; the converse fails only for values that compare
    equal with different bits (NaN payloads, long double padding), which
    :func:`mismatched` then sorts out.
    """
    if not (a.flags.c_contiguous and b.flags.c_contiguous):
        return False
    return bool(np.array_equal(a.reshape(-1).view(np.uint8), b.reshape(-1).view(np.uint8)))


def differences(a: np.ndarray, b: np.ndarray) -> tuple[int, float]:
    """Return (count of values that differ, ``norm2(b - a) / norm2(a)``): the difference's
    relative 2-norm, the measure of the accuracy limit (``inf`` for another shape or dtype)."""
    if a.shape != b.shape or a.dtype != b.dtype:
        return max(a.size, b.size, 1), float("inf")
    if same_bytes(a, b):  # the same bytes are the same values (padding bytes included)
        return 0, 0.0
    if a.dtype.kind not in "fc":
        count = int(np.count_nonzero(a != b))
        return count, (float("inf") if count else 0.0)
    count = int(np.count_nonzero(mismatched(a, b)))
    if not count:
        return 0, 0.0
    return count, relative(a.astype(np.clongdouble) - b.astype(np.clongdouble), norm2(a))


def rounding_allowance(ctx: CheckContext) -> float:
    """Return how far apart (relative 2-norm) two outputs of the same input may lie when each is
    within the accuracy limit of the exact one: ``2 limit`` plus the rounding allowance."""
    return 2 * ctx.limit + ctx.rounding


def check_repeatable(ctx: CheckContext) -> list[CheckRow]:
    """The same input twice (and again after another input) gives bitwise the same output.

    First, a result the caller kept must not change on the next call (``output-aliased``,
    :mod:`~fftgauge.harness.battery.aliasing`; for plans that do not declare a reused buffer).

    A backend that declares ``bitwise_reproducible=False`` (its summation order may depend on
    its thread count or the data's alignment) passes with outputs that differ within
    :func:`rounding_allowance`; a larger difference fails either way.
    """
    aliased = kept_output_change(ctx.plan, ctx.native_input(ctx.random_input("output-kept")),
                                 ctx.native_input(ctx.random_input("output-kept-other")))
    if aliased is not None:  # harness/battery/aliasing.py: a function's kept result changed
        return [ctx.row("repeatable", "fail", diagnosis="output-aliased", eps=False, message=aliased)]
    x = ctx.random_input("repeatable")
    other = ctx.random_input("repeatable-other")
    first = ctx.run(x)
    second = ctx.run(x)
    ctx.run(other)
    third = ctx.run(x)
    bitwise = getattr(ctx.capabilities, "bitwise_reproducible", True)
    allowed = 0.0 if bitwise else rounding_allowance(ctx)
    dtype = ctx.case.dtype
    worst = 0.0
    for label, again in (("the next call", second), ("a call after another input", third)):
        count, rel = differences(first, again)
        if count and not rel <= allowed:
            within = "" if bitwise else f", beyond the {fmt_eps(allowed, dtype)} two accurate outputs may differ by"
            return [ctx.row("repeatable", "fail", rel, allowed, diagnosis="nondeterministic",
                            message=f"the same input gave different outputs on {label}: {count} of "
                                    f"{first.size} values differ, by {fmt_eps(rel, dtype)} of the output norm{within}")]
        worst = max(worst, rel)
    if worst:
        return [ctx.row("repeatable", "pass", worst, allowed,
                        message=f"three calls on the same input differ by up to {fmt_eps(worst, dtype)}, within the "
                                f"accuracy limit ({fmt_eps(allowed, dtype)}); the backend declares its results are not "
                                f"bitwise reproducible")]
    return [ctx.row("repeatable", "pass", 0.0, allowed,
                    message="three calls on the same input (one after another input) agree bitwise")]


def _sequential(ctx: CheckContext, plans: list, xs: list) -> list[np.ndarray]:
    """Return ``plans[t]``'s output for ``xs[t]``, one call after another in this thread
    (inputs and outputs in the backend's own convention)."""
    out = []
    for plan, x in zip(plans, xs):
        out.append(ctx.run_native(x, plan))
    return out


def check_concurrent(ctx: CheckContext) -> list[CheckRow]:
    """Several threads calling the same plan, and separately planned plans, at once.

    ``CONCURRENT_THREADS`` threads each transform their own input ``CONCURRENT_ROUNDS`` times
    through the shared plan and through a plan of their own, all released together, each
    thread under the thread-pool caps of the calling thread (:func:`thread_caps_applied`).
    Every result is compared with the same call made alone through the same plan. A result
    counts as thread-unsafe only when its difference (relative 2-norm) exceeds both
    ``SPREAD_FACTOR`` times the backend's own run-to-run spread (the same calls repeated one
    after another) and :func:`rounding_allowance` (two outputs within the accuracy limit of
    the exact one): a library whose result depends bitwise on its thread count or a
    thread-local setting is not thread-unsafe. A plan that returns its own reused output
    buffer (as :class:`~fftgauge.backends.base.Plan` allows) cannot be shared between threads
    by design: for such a plan only the separately planned plans run.

    The threads are the process's :class:`~fftgauge.harness.battery.thread_crew.ThreadCrew`,
    started once and reused by every case; each call still runs on its own thread, at the
    same time as the others.
    """
    case, dtype = ctx.case, ctx.case.dtype
    xs = [ctx.native_input(ctx.random_input(f"concurrent-{t}")) for t in range(CONCURRENT_THREADS)]
    alone = [ctx.run_native(x) for x in xs]
    spread = max(differences(a, again)[1] for a, again in zip(alone, [ctx.run_native(x) for x in xs]))
    try:
        with np.errstate(all="ignore"):
            probe_a = ctx.plan.execute(np.array(xs[0], copy=True))
            probe_b = ctx.plan.execute(np.array(xs[1 % len(xs)], copy=True))
    except Exception as exc:  # noqa: BLE001
        raise BackendFailure(f"the backend raised {exception_text(exc)}") from None
    reuses_buffer = isinstance(probe_a, np.ndarray) and isinstance(probe_b, np.ndarray) and \
        np.shares_memory(probe_a, probe_b)
    own_plans = []
    try:
        for _ in range(CONCURRENT_THREADS):
            own_plans.append(ctx.backend.plan(case))
    except Exception as exc:  # noqa: BLE001
        for p in own_plans:
            p.close()
        raise BackendFailure(f"planning again raised {exception_text(exc)}") from None
    try:
        own_alone = _sequential(ctx, own_plans, xs)
        caps = thread_caps()
        finished, results = _run_at_once(ctx, own_plans, xs, reuses_buffer, caps)
    finally:
        for p in own_plans:
            try:
                p.close()
            except Exception:  # noqa: BLE001
                pass
    allowed = max(SPREAD_FACTOR * spread, rounding_allowance(ctx))
    calls = sum(len(r) for r in results)
    bad: list[str] = []
    worst = 0.0
    for per_thread in results:
        for how, t, out in per_thread:
            if how == "raised":
                bad.append(f"a concurrent call raised {exception_text(out)}")
                continue
            count, rel = differences(own_alone[t] if how == "own plan" else alone[t], out)
            worst = max(worst, rel)
            if count and not rel <= allowed:
                bad.append(f"{how}: {count} of {out.size} values differ, by {fmt_eps(rel, dtype)}")
    scope = "separately planned plans only (the plan reuses its output buffer)" if reuses_buffer else \
        "the shared plan and separately planned plans"
    scope += ", each thread under the caller's thread-pool caps"
    if not finished:
        bad.append(f"a thread did not finish within {CONCURRENT_TIMEOUT_SECONDS:g} s")
    limits = (f"the backend's own run-to-run spread is {fmt_eps(spread, dtype)}, two accurate outputs may differ by "
              f"{fmt_eps(rounding_allowance(ctx), dtype)}")
    if bad:
        aliased = reuses_buffer and not reuse_allowed(ctx.plan)  # one shared buffer: aliasing, not threads
        return [ctx.row("concurrent", "fail", finite_or_none(worst), allowed,
                        diagnosis="output-aliased" if aliased else "thread-unsafe",
                        message=("every call returns the same output buffer, so threads overwrite each other's "
                                 "results (see repeatable); " if aliased else "")
                        + f"{len(bad)} of {calls} calls from {CONCURRENT_THREADS} threads at once ({scope}) "
                          f"differ from the same call alone beyond what {limits}; first: {bad[0]}")]
    if worst == 0.0:
        how = "bitwise"
    else:
        how = (f"within {fmt_eps(worst, dtype)} ({limits}): rounding-level differences, as a thread count or a "
               f"thread-local setting makes, not thread-unsafety")
    return [ctx.row("concurrent", "pass", worst, allowed,
                    message=f"{calls} calls from {CONCURRENT_THREADS} threads at once ({scope}) equal the same "
                            f"calls alone, {how}")]


def _run_at_once(ctx: CheckContext, own_plans: list, xs: list, reuses_buffer: bool,
                 caps: tuple) -> tuple[bool, list[list[tuple[str, int, Any]]]]:
    """Return (every thread finished in time, per thread its ``(how, t, output or exception)``)
    for the calls of :func:`check_concurrent`, all threads released together."""
    barrier = threading.Barrier(CONCURRENT_THREADS, timeout=60)
    results: list[list[tuple[str, int, Any]]] = [[] for _ in range(CONCURRENT_THREADS)]

    def work(t: int) -> None:
        try:
            with thread_caps_applied(caps):
                barrier.wait()
                for _ in range(CONCURRENT_ROUNDS):
                    if not reuses_buffer:
                        results[t].append(("shared plan", t,
                                           copy_output(ctx.plan.execute(np.array(xs[t], copy=True)))))
                    results[t].append(("own plan", t, copy_output(own_plans[t].execute(np.array(xs[t], copy=True)))))
        except Exception as exc:  # noqa: BLE001 - reported by the caller
            results[t].append(("raised", t, exc))

    with np.errstate(all="ignore"):
        finished = thread_crew().run([lambda t=t: work(t) for t in range(CONCURRENT_THREADS)],
                                     CONCURRENT_TIMEOUT_SECONDS)
    return finished, results


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
    ignoring the strides). The layouts are of the input in the backend's declared convention,
    and the outputs are compared as the backend gives them.
    """
    case = ctx.case
    given = ctx.random_input("strided")
    x = ctx.native_input(given)
    filler = ctx.native_input(ctx.random_input("strided-filler"))
    base = ctx.run_native(x)
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
        out = ctx.run_native(view, copy_input=False)
        if out.shape != base.shape:
            return [ctx.row("strided", "fail", diagnosis="shape", eps=False,
                            message=f"{name}: output shape {out.shape}, contiguous input gives {base.shape}")]
        if out.dtype != base.dtype:
            return [ctx.row("strided", "fail", diagnosis="dtype", eps=False,
                            message=f"{name}: output dtype {out.dtype}, contiguous input gives {base.dtype}")]
        count, _ = differences(base, out)
        if not count:
            continue
        value = relative(out.astype(np.clongdouble) - base.astype(np.clongdouble), norm2(out) + norm2(base))
        if value <= ctx.limit + ctx.rounding:
            notes.append(f"{name}: within rounding ({fmt_eps(value, case.dtype)}), not bitwise")
            continue
        code, why = "unknown", "the values differ"
        if memory_order is not None and length > 1:
            as_read = ctx.run_native(np.ascontiguousarray(memory_order))
            if as_read.shape == out.shape and differences(as_read, out)[0] == 0:
                why = ("the output is the transform of the array's memory read in order: the backend ignores "
                       "the strides")
        if why == "the values differ":
            code, why = ctx.diagnose(given, ctx.from_native(out))
        return [ctx.row("strided", "fail", value, ctx.limit + ctx.rounding, diagnosis=code,
                        message=f"{name}: output differs from the contiguous input's by "
                                f"{fmt_eps(value, case.dtype)}; {why}")]
    msg = "every 2nd element, negative stride and both: " + ("; ".join(notes) if notes else "bitwise equal")
    return [ctx.row("strided", "pass", eps=False, message=msg)]


def check_precision(ctx: CheckContext) -> list[CheckRow]:
    """The output's dtype is of the case's precision or higher (real for irfft and for an rfft
    with a declared packing of n reals, complex otherwise)."""
    case = ctx.case
    x = ctx.native_input(ctx.random_input("precision"))
    try:
        with np.errstate(all="ignore"):
            out = ctx.plan.execute(np.array(x, copy=True))
    except Exception as exc:  # noqa: BLE001
        raise BackendFailure(f"the backend raised {exception_text(exc)}") from None
    if not isinstance(out, np.ndarray):
        return [ctx.row("precision", "fail", diagnosis="dtype", eps=False,
                        message=f"output is a {type(out).__name__}, not a numpy array")]
    want = ctx.convention.output_dtype(case)
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
    """The output is 1-D with ``case.output_length`` values (n reals for an rfft with a declared packing)."""
    case = ctx.case
    due = ctx.convention.output_length(case)
    out = ctx.run_native(ctx.native_input(ctx.random_input("shape")))
    if out.shape != (due,):
        return [ctx.row("shape", "fail", float(out.size), float(due), diagnosis="shape", eps=False,
                        message=f"output shape {out.shape} where ({due},) is due")]
    return [ctx.row("shape", "pass", float(out.size), float(due), eps=False, message=f"output shape ({due},)")]
