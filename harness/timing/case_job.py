"""The timing runner's per-case job: plan one case, take its samples round after round, and
return its ``fftgauge-time/1`` row (:func:`time_case`, the function the worker runs).

The timer itself (warm-up, loops, samples, overhead floor) is
:mod:`fftgauge.harness.timing.timer`; the runner that hands out cases and rounds is
:mod:`fftgauge.harness.timing.runner`. A case timed in rounds keeps its plan, input and
samples in this worker process between rounds (:data:`_OPEN_CASES`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, fields
from typing import Any

import numpy as np

from fftgauge.backends.base import Backend, Plan
from fftgauge.harness.cases import Case
from fftgauge.harness.errors import UnsupportedCase
from fftgauge.harness.rows import TimeRow
from fftgauge.harness.shapes.case import ShapeCase
from fftgauge.harness.shapes.fields import case_from_fields, case_size, row_fields
from fftgauge.harness.shapes.timed import plan_for, timing_input, unsupported
from fftgauge.harness.timing.clock import DEFAULT_CLOCK, Clock
from fftgauge.harness.timing.memory import detect_in_place, measure_memory
from fftgauge.harness.timing.opcount import gflops, ns_per_nlogn, shaped_pseudo_flops
from fftgauge.harness.timing.timer import (Measurement, Timer, TimerSettings, TimingSession, limit_threads,
                                           measure_self_reported)


_SETTING_NAMES = {f.name for f in fields(TimerSettings)}
_CASE_OPTIONS = {"threads", "seed", "measure_memory", "rounds", "round"}


def _split_options(options: dict[str, Any]) -> tuple[TimerSettings, dict[str, Any]]:
    unknown = set(options) - _SETTING_NAMES - _CASE_OPTIONS
    if unknown:
        raise ValueError(f"unknown timing options: {', '.join(sorted(unknown))}; known: "
                         f"{', '.join(sorted(_SETTING_NAMES | _CASE_OPTIONS))}")
    settings = TimerSettings(**{k: v for k, v in options.items() if k in _SETTING_NAMES})
    rest = {"threads": 1, "seed": 0, "measure_memory": True, "rounds": 1, "round": 0}
    rest.update({k: v for k, v in options.items() if k in _CASE_OPTIONS})
    return settings, rest


@dataclass
class _OpenCase:
    """A case being timed over several rounds in this worker: its plan, input and samples so far."""

    plan: Plan
    x: np.ndarray
    session: TimingSession
    plan_seconds: float


#: Cases whose rounds are not all done, in this worker process, by (case fields, seed).
_OPEN_CASES: dict[tuple, _OpenCase] = {}


def planned(backend: Backend, case: Case | ShapeCase, clock: Clock) -> tuple[Plan, float]:
    """Return ``backend.plan(case)`` (``plan_shaped`` for a shaped case) and the seconds it took
    on ``clock``; a 1-D plan prepares numpy-convention inputs in the convention the backend
    declared (a packed irfft half spectrum, a bit-reversed ifft spectrum), a shaped one lays the
    input out as the case says (:func:`fftgauge.harness.shapes.timed.plan_for`)."""
    return plan_for(backend, case, clock)


def _open_case(backend: Backend, case: Case | ShapeCase, settings: TimerSettings, seed: int,
               clock: Clock) -> _OpenCase:
    """Plan ``case``, prepare its input and start its timing session (planning timed)."""
    x = timing_input(case, seed)
    plan, plan_seconds = planned(backend, case, clock)
    try:
        session = Timer(settings, clock).start(plan, x)
    except BaseException:
        plan.close()
        raise
    return _OpenCase(plan, x, session, plan_seconds)


def _samples_this_round(settings: TimerSettings, rounds: int, round_index: int, taken: int) -> int:
    """Return how many samples round ``round_index`` of ``rounds`` takes: an equal share of
    ``settings.samples``, the last round whatever is still missing."""
    if round_index >= rounds - 1:
        return max(0, settings.samples - taken)
    return max(1, math.ceil(settings.samples / rounds))


def time_case(backend: Backend, case_fields: tuple, options: dict, clock: Clock | None = None) -> dict | None:
    """Plan and time one case, or one round of it; the job function the worker process runs.

    With ``rounds`` > 1 the runner calls this once per round, with other cases (and other
    backends' workers) timed in between: round 0 plans the case and starts its timing
    session, every round takes its share of the samples (one untimed call first), and the
    last round measures memory, closes the plan and returns the row over all the samples.
    A worker restarted half-way (after a crash of another case) plans the case again.

    Parameters
    ----------
    backend : the adapter, with its own thread option already set by the registry.
    case_fields : ``(kind, dtype, n, norm)``, or a shaped case's
        ``(kind, dtype, shape, axes, layout, norm)`` (:mod:`fftgauge.harness.shapes.fields`).
    options : :class:`TimerSettings` fields, plus ``threads`` (recorded in the row and the
        cap :func:`limit_threads` puts on BLAS/OpenMP pools; default 1), ``seed`` (of the
        random input, :func:`fftgauge.harness.battery.inputs.case_rng` with purpose ``"time"``; default 0),
        ``measure_memory`` (default True), ``rounds`` (default 1) and ``round`` (0-based,
        default 0).
    clock : what planning and sampling read (nanoseconds); default
        :data:`fftgauge.harness.timing.clock.DEFAULT_CLOCK`.

    Returns
    -------
    dict or None : :meth:`TimeRow.as_dict` (``memory_method`` None when memory is not
        measured) once the case is finished (the last round, or the only call of a backend
        that reports its own times), None after an earlier round.

    Raises
    ------
    UnsupportedCase
        When the backend does not claim the case, or its declared convention cannot be
        given at the case's size (``order=bit-reversed`` needs a power of two).
    ValueError
        For an unknown option key.
    Exception
        Whatever the backend raises while planning or executing.
    """
    case = case_from_fields(case_fields)
    settings, rest = _split_options(options)
    reason = unsupported(backend, case)
    if reason is not None:
        raise UnsupportedCase(reason)
    key = (tuple(case_fields), rest["seed"])
    rounds, round_index = max(1, int(rest["rounds"])), int(rest["round"])
    with limit_threads(rest["threads"]):
        if getattr(backend, "reports_own_timing", False):
            _close_open_case(key)
            return _time_whole(backend, case, settings, rest, clock or DEFAULT_CLOCK)
        if key not in _OPEN_CASES or round_index == 0:
            _close_open_case(key)
            _OPEN_CASES[key] = _open_case(backend, case, settings, rest["seed"], clock or DEFAULT_CLOCK)
        open_case = _OPEN_CASES[key]
        try:
            open_case.session.take(_samples_this_round(settings, rounds, round_index,
                                                       len(open_case.session.raw_ns)))
            if round_index < rounds - 1:
                return None
            m = open_case.session.result()
            mem, in_place = _memory(open_case.plan, open_case.x, rest["measure_memory"])
            noted = plan_noted(open_case.plan)
        except BaseException:
            _close_open_case(key)
            raise
        _close_open_case(key)
    return _row(backend, case, rest["threads"], open_case.plan_seconds, m, mem, in_place, "harness", noted)


def _close_open_case(key: tuple) -> None:
    """Close and forget the open case ``key`` of this worker (nothing when there is none)."""
    open_case = _OPEN_CASES.pop(key, None)
    if open_case is not None:
        open_case.plan.close()


def _memory(plan: Plan, x: np.ndarray, wanted: bool) -> tuple[Any, bool]:
    """Return (the memory measurement or None, whether the plan works in place)."""
    if wanted:
        mem = measure_memory(plan, x)
        return mem, mem.in_place
    return None, any(detect_in_place(plan, x))


def _time_whole(backend: Backend, case: Case | ShapeCase, settings: TimerSettings, rest: dict[str, Any],
                clock: Clock) -> dict:
    """Time a backend that reports its own times in one call (rounds do not apply); return the row."""
    x = timing_input(case, rest["seed"])
    plan, plan_seconds = planned(backend, case, clock)
    try:
        m = measure_self_reported(plan, x, settings, clock)
        source = "program" if m is not None else "harness"
        if m is None:
            m = Timer(settings, clock).measure(plan, x)
        mem, in_place = _memory(plan, x, rest["measure_memory"])
        noted = plan_noted(plan)
    finally:
        plan.close()
    return _row(backend, case, rest["threads"], plan_seconds, m, mem, in_place, source, noted)


def plan_noted(plan: Any) -> dict[str, Any]:
    """Return the time-row fields a plan measured of itself
    (:meth:`~fftgauge.backends.base.Plan.time_row_fields`; ``{}`` for a plan without the method)."""
    method = getattr(plan, "time_row_fields", None)
    return dict(method()) if callable(method) else {}


def _row(backend: Backend, case: Case | ShapeCase, threads: int, plan_seconds: float, m: Measurement, mem: Any,
         in_place: bool, source: str, noted: dict[str, Any] | None = None) -> dict:
    """Return the ``fftgauge-time/1`` row of a finished case as a dict (a shaped case's with
    :data:`~fftgauge.harness.shapes.fields.ROW_FIELDS`; its rates count every transform of the batch),
    with the fields the plan ``noted`` of itself (:meth:`~fftgauge.backends.base.Plan.time_row_fields`).

    Raises
    ------
    TypeError
        When the plan noted a field a time row does not have.
    """
    n, batch = case_size(case), getattr(case, "batch", 1)
    flops = shaped_pseudo_flops(n, batch, case.is_real)
    row = TimeRow(
        backend=backend.label, kind=case.kind, dtype=case.dtype, n=n, threads=threads,
        plan_seconds=plan_seconds, seconds=m.seconds, seconds_low=m.seconds_low,
        seconds_high=m.seconds_high, samples=m.samples, loops=m.loops, flops=flops,
        gflops=gflops(flops, m.seconds), ns_per_nlogn=ns_per_nlogn(m.seconds / batch, n),
        peak_bytes=None if mem is None else mem.peak_bytes,
        in_place=in_place, norm=case.norm,
        message=("times measured by the program itself (its reported elapsed time per call)" if source == "program"
                 else "" if m.seconds > 0 else "median at or below the timing loop's overhead floor"),
        timing_source=source,
        overhead_seconds=m.overhead_seconds, floor_seconds=m.floor_seconds, relative_spread=m.relative_spread,
        coverage=m.coverage, cold_cache=m.cold_cache, memory_method=None if mem is None else mem.method,
        seconds_p10=m.seconds_p10, seconds_p10_low=m.seconds_p10_low, seconds_p10_high=m.seconds_p10_high,
        **row_fields(case), **(noted or {}),
    )
    return row.as_dict()
