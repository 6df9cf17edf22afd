"""The fixed-point checks of one q15/q31 case, their verdicts and diagnoses.

``sqnr``      on noise at every level where the exact answer fits the format, the
              backend's SQNR is at most ``margin_db`` below the built-in radix-2's with the
              same scaling and rounding; the row's ``value`` is the worst shortfall in dB,
              ``limit`` the margin (1 dB; the user sets another with ``--limit sqnr=2dB``,
              judged in the parent by :mod:`fftgauge.harness.battery.criteria`).
``overflow``  over a sweep of a tone and noise from 0 to -12 dBFS, the backend has no more
              output parts far off (:attr:`FixedMetrics.wrapped`: more than half the range
              from the exact answer clipped to the rails) than the saturating reference
              with the same scaling, and reaches the rails at no level more than 1 dB below
              the lowest level where the reference does, and on the overload input
              (``corners``: every part at full scale) its SQNR is at most
              :data:`OVERLOAD_GAP_DB` below the saturating reference's; ``value`` is the
              backend's count of far-off parts over the sweep, ``limit`` the reference's.

Every kind (``fft``, ``ifft``, ``rfft``, ``irfft``) is checked the same way, on its own inputs
(:mod:`~fftgauge.harness.fixed.signals`), against the exact unnormalised transform of that
kind and the built-in reference's same kind.

A failing row's diagnosis names the first hypothesis that explains the measured SQNRs
(:func:`diagnose`): ``scaling-shift`` (the outputs match the exact DFT under another shift),
``sign`` (they match the transform of the opposite direction: an inverse whose twiddles are
not conjugated, a forward one whose are), ``overflow`` (parts far off, as a wrap-around leaves them), ``rounding`` (they match the
reference that truncates), ``twiddle-bits`` (they match the reference with 8-, 10- or 12-bit
twiddles), else ``precision``.
"""

from __future__ import annotations

import math
from typing import Any, Callable

import numpy as np

from fftgauge.harness.battery.context import OutputProblem
from fftgauge.harness.cases import Case
from fftgauge.harness.errors import BackendFailure
from fftgauge.harness.fixed.declared import FixedScaling
from fftgauge.harness.fixed.formats import QFormat, fixed_format
from fftgauge.harness.fixed.measure import (Point, exact_output, measure_points, opposite_sign_output, read_output,
                                            reference_for)
from fftgauge.harness.fixed.metrics import sqnr_db
from fftgauge.harness.fixed.signals import LEVELS_DBFS, test_signal
from fftgauge.harness.fixed.structure import PARTNER, STRUCTURE_CHECKS, structure_rows
from fftgauge.harness.rows import CheckRow, error_rows, skip_rows

__all__ = ["DEFAULT_MARGIN_DB", "FIXED_CHECKS", "SWEEP_DBFS", "diagnose", "fixed_check_case", "overflow_row",
           "sqnr_row"]

#: The fixed-point checks, in the order they run (``input-intact`` and ``repeatable`` as in the
#: float battery: the caller's pairs unchanged, the same input giving the same output bit for bit).
#: ``linearity``, ``impulse``, ``time-shift``, ``round-trip``, ``concurrent`` and ``shape`` are
#: :mod:`fftgauge.harness.fixed.structure`'s, with limits in LSBs from harness/fixed/bounds.py.
FIXED_CHECKS = ("sqnr", "overflow", "input-intact", "repeatable") + STRUCTURE_CHECKS

#: dB the backend's SQNR may be below the reference's before ``sqnr`` fails.
DEFAULT_MARGIN_DB = 1.0

#: Shortfall (dB) from which the sqnr row's message names a cause (:func:`diagnose`).
CAUSE_FROM_DB = 0.25

#: Levels of the overflow sweep (dBFS).
SWEEP_DBFS = tuple(float(-k) for k in range(13))

#: dB below the saturating reference's SQNR on the overload input (``corners`` at 0 dBFS) taken
#: for wrap-around inside the transform: saturation degrades it gracefully, a wrap does not
#: (measured at N = 8..4096, Q15 and Q31: a 1/2-per-stage radix-2 that saturates gets 16.7 dB,
#: its twin that wraps -3.0 dB).
OVERLOAD_GAP_DB = 10.0

#: Distance (mean |dB|) within which a hypothesis's SQNRs explain the backend's.
MATCH_DB = 1.0

#: Twiddle widths the ``twiddle-bits`` hypothesis tries.
TWIDDLE_HYPOTHESES = (8, 10, 12)


def fixed_check_case(backend: Any, case: Any, seed: int, margin_db: float = DEFAULT_MARGIN_DB) -> list[CheckRow]:
    """Plan the q15/q31 ``case`` on ``backend`` and return the rows of :data:`FIXED_CHECKS`.

    A case outside the backend's claims or a backend without a declared :class:`FixedScaling` (``Capabilities(fixed=...)``) gives ``skip`` or ``error``
    rows; a plan or a run that raises gives ``error`` rows; an output of floats or of the
    wrong shape gives ``fail`` rows (``dtype``/``shape``). Never raises for the backend's sake.
    """
    names = list(FIXED_CHECKS)
    label = backend.label
    reason = backend.unsupported_reason(case)
    if reason is None and case.n & (case.n - 1):
        reason = f"the fixed-point reference is a radix-2: powers of two only (n = {case.n})"
    if reason is not None:
        return skip_rows(label, case, names, reason)
    declared = getattr(backend.capabilities(), "fixed", None)
    if not isinstance(declared, FixedScaling):
        return error_rows(label, case, names, f"{label} declares no fixed-point scaling: give its capabilities "
                                              "fixed=FixedScaling(output_shift=...) (docs/fixed-point.md)")
    fmt = fixed_format(case.dtype)
    try:
        plan = backend.plan(case)
    except Exception as exc:  # noqa: BLE001 - a plan that raises is an error row
        return error_rows(label, case, names, f"planning failed: {type(exc).__name__}: {exc}")
    try:
        return [sqnr_row(label, case, plan.execute, fmt, declared, seed, margin_db),
                overflow_row(label, case, plan.execute, fmt, declared, seed),
                *behaviour_rows(label, case, plan.execute, fmt, declared, seed, backend.capabilities()),
                *structure_rows(lambda check, status, **fields: row_of(label, case, check, status, **fields),
                                plan.execute, fmt, case.n, declared, seed, lambda: backend.plan(case),
                                kind=case.kind, partner=partner_of(backend, case))]
    except OutputProblem as problem:
        return [row_of(label, case, name, "fail", diagnosis=problem.code, message=problem.message) for name in names]
    except Exception as exc:  # noqa: BLE001 - the backend raised or returned something unusable
        return error_rows(label, case, names, f"{type(exc).__name__}: {exc}" if not isinstance(exc, BackendFailure)
                          else str(exc))
    finally:
        try:
            plan.close()
        except Exception:  # noqa: BLE001
            pass


def partner_of(backend: Any, case: Any) -> Callable[[], Any] | str:
    """Return a function planning the transform that undoes ``case`` on ``backend`` (ifft for
    fft and back, irfft for rfft and back), or the reason it cannot (a string)."""
    other = Case(PARTNER[case.kind], case.dtype, case.n, case.norm)
    reason = backend.unsupported_reason(other)
    if reason is not None:
        return f"{backend.label} takes no {other.kind} in {case.dtype} at n = {case.n} ({reason})"
    return lambda: backend.plan(other)


def row_of(label: str, case: Any, check: str, status: str, **fields: Any) -> CheckRow:
    """Return a :class:`CheckRow` of ``check`` for ``case``."""
    return CheckRow(backend=label, kind=case.kind, dtype=case.dtype, n=case.n, check=check, status=status,
                    norm=case.norm, **fields)


def sqnr_row(label: str, case: Any, run: Callable, fmt: QFormat, declared: FixedScaling, seed: int,
             margin_db: float) -> CheckRow:
    """Return the ``sqnr`` row: the worst shortfall against the reference over the grid."""
    reference = reference_for(fmt, declared)
    points = measure_points(run, fmt, case.n, declared, reference, seed, kind=case.kind)
    judged = judged_points(points)
    if not judged:
        return row_of(label, case, "sqnr", "skip", message=f"no noise level of {', '.join(map(str, LEVELS_DBFS))} "
                      f"dBFS gives an exact output that fits {fmt.name} with the declared shift")
    worst = max(judged, key=lambda p: p.shortfall_db)
    status = "pass" if worst.shortfall_db <= margin_db else "fail"
    # the cause is looked for past CAUSE_FROM_DB even on a pass: a stricter --limit may fail the row
    cause = None
    if worst.shortfall_db > CAUSE_FROM_DB:
        cause = diagnose(points, run, fmt, case.n, declared, seed, margin_db, kind=case.kind)
    diagnosis = cause if status == "fail" else None
    tone = next((p for p in points if p.signal == "tone" and p.level_dbfs == 0.0), None)
    gap = worst.shortfall_db
    words = f"{abs(gap):.1f} dB {'worse' if gap > 0 else 'better'} than" if abs(gap) >= 0.05 else "as good as"
    message = (f"worst on {worst.signal} at {worst.level_dbfs:g} dBFS: SQNR {worst.backend.sqnr_db:.1f} dB, "
               f"{words} a {reference.describe()} "
               f"({worst.reference.sqnr_db:.1f} dB; margin {margin_db:g} dB); max error "
               f"{worst.backend.max_error_lsb:.3g} LSB")
    if cause == "precision":
        message += "; no shift, rounding or twiddle-width hypothesis explains the shortfall"
    elif cause is not None:
        message += f"; the shortfall points to {cause}"
    if tone is not None and math.isfinite(tone.backend.enob):
        message += f"; ENOB {tone.backend.enob:.1f} bits at a full-scale tone (reference {tone.reference.enob:.1f})"
    message += ("; SQNR dB (backend/reference) " +
                ", ".join(f"{p.signal}@{p.level_dbfs:g}={p.backend.sqnr_db:.1f}/{p.reference.sqnr_db:.1f}"
                          for p in points if p.representable))
    return row_of(label, case, "sqnr", status, value=float(worst.shortfall_db), limit=float(margin_db),
                  diagnosis=diagnosis, message=message, reference=reference.describe(),
                  noise_sqnr_db={f"{p.level_dbfs:g}": float(p.backend.sqnr_db) for p in points if p.signal == "noise"})


def behaviour_rows(label: str, case: Any, run: Callable, fmt: QFormat, declared: FixedScaling, seed: int,
                   capabilities: Any) -> list[CheckRow]:
    """Return the ``input-intact`` and ``repeatable`` rows: noise at -6 dBFS given three times;
    the caller's pairs must be unchanged (unless the backend declares ``in_place``) and the
    three outputs equal bit for bit."""
    x = test_signal("noise", case.n, -6.0, fmt, seed, case.kind)
    given = x.copy()
    outputs = [read_output(run(x if k == 0 else given.copy()), fmt, case.n, declared.shift_at(case.n), case.kind)[0]
               for k in range(3)]
    changed = int(np.count_nonzero((x != given).reshape(x.shape[0], -1).any(axis=-1)))
    if changed and not getattr(capabilities, "in_place", False):
        intact = row_of(label, case, "input-intact", "fail", value=float(changed), limit=0.0,
                        diagnosis="input-modified", message=f"the plan changed {changed} of the caller's {x.shape[0]} input values")
    else:
        intact = row_of(label, case, "input-intact", "pass", value=float(changed), limit=0.0,
                        message="the caller's pairs are unchanged" if not changed else
                        f"{changed} pairs changed (the backend declares in_place)")
    differ = max(int(np.count_nonzero(np.any(o != outputs[0], axis=-1))) for o in outputs[1:])
    repeat = row_of(label, case, "repeatable", "fail" if differ else "pass", value=float(differ), limit=0.0,
                    diagnosis="nondeterministic" if differ else None,
                    message=f"{differ} of {case.n} outputs differ between runs of the same input" if differ else
                    "three runs of the same input gave the same output bit for bit")
    return [intact, repeat]


def judged_points(points: list[Point]) -> list[Point]:
    """Return the points the ``sqnr`` verdict judges: the noise at every level where the exact
    output fits the format and the reference is not exact. A tone's and an impulse's SQNRs
    depend on where each rounding error falls (two sound designs differ by several dB), so
    they are reported, not judged; the noise's SQNR is stable to a few tenths of a dB."""
    return [p for p in points if p.signal == "noise" and p.representable and math.isfinite(p.reference.sqnr_db)]


def first_overflow_level(points: list[Point], which: str) -> float | None:
    """Return the lowest level (dBFS) at which ``which`` (``backend``/``reference``) has an
    output part at the rails or wrapped around, or None when it has none on the sweep."""
    hit = [p.level_dbfs for p in points if getattr(p, which).at_rails or getattr(p, which).wrapped]
    return min(hit) if hit else None


def overflow_row(label: str, case: Any, run: Callable, fmt: QFormat, declared: FixedScaling, seed: int) -> CheckRow:
    """Return the ``overflow`` row: wrap-around and the saturation onset against the reference."""
    reference = reference_for(fmt, declared)
    points = measure_points(run, fmt, case.n, declared, reference, seed, signals=("tone", "noise"), levels=SWEEP_DBFS,
                            kind=case.kind)
    wrapped = sum(p.backend.wrapped for p in points)
    ref_wrapped = sum(p.reference.wrapped for p in points)
    mine, theirs = first_overflow_level(points, "backend"), first_overflow_level(points, "reference")
    said = f"outputs at the rails from {mine:g} dBFS" if mine is not None else "no outputs at the rails"
    ref_said = f"from {theirs:g} dBFS" if theirs is not None else "at no level down to 0 dBFS"
    message = (f"{said} (a {reference.describe()}: {ref_said}); {wrapped} output parts more than half the range "
               f"off over the sweep (the reference: {ref_wrapped})")
    less_headroom = mine is not None and (theirs is None or mine < theirs - 1.0)
    overload = measure_points(run, fmt, case.n, declared, reference, seed, signals=("corners",), levels=(0.0,),
                              kind=case.kind)[0]
    collapsed = overload.shortfall_db > OVERLOAD_GAP_DB
    message += (f"; overload (every part at full scale, corners): SQNR {overload.backend.sqnr_db:.1f} dB, the saturating "
                f"reference {overload.reference.sqnr_db:.1f} dB")
    failed = wrapped > ref_wrapped or less_headroom or collapsed
    if collapsed:
        if overload.reference.at_rails or overload.reference.wrapped or overload.backend.sqnr_db < 0.0:
            message += f" ({overload.shortfall_db:.1f} dB worse: sums wrap around inside)"
        else:  # a real input the reference takes without clipping: the backend clips inside
            message += (f" ({overload.shortfall_db:.1f} dB worse: it overflows inside where the reference has "
                        "headroom)")
    if wrapped > ref_wrapped:
        first = min(p.level_dbfs for p in points if p.backend.wrapped > p.reference.wrapped)
        message += f"; wraps around from {first:g} dBFS where the reference saturates: missing saturation"
    return row_of(label, case, "overflow", "fail" if failed else "pass", value=float(wrapped),
                  limit=float(ref_wrapped), diagnosis="overflow" if failed else None, message=message,
                  reference=reference.describe())


def diagnose(points: list[Point], run: Callable, fmt: QFormat, n: int, declared: FixedScaling, seed: int,
             margin_db: float, kind: str = "fft") -> str:
    """Return the diagnosis code of a failing ``sqnr`` of transform ``kind``: the first
    hypothesis that explains the backend's SQNRs (see the module docstring), else ``precision``."""
    judged = judged_points(points)
    if shift_error(judged, run, fmt, n, declared, seed, kind) is not None:
        return "scaling-shift"  # first: a wrong shift also puts outputs at the rails or far off
    if opposite_sign(judged, run, fmt, n, declared, seed, kind):
        return "sign"
    if any(p.backend.wrapped for p in judged):
        return "overflow"
    mine = np.array([p.backend.sqnr_db for p in judged])
    other = "round-half-up" if declared.rounding == "truncate" else "truncate"
    hypotheses = [("rounding", {"rounding": other})] + [("twiddle-bits", {"twiddle_bits": tb})
                                                         for tb in TWIDDLE_HYPOTHESES if tb < fmt.bits - 1]
    for code, changes in hypotheses:
        variant = reference_for(fmt, declared, **changes)
        keys = {(p.signal, p.level_dbfs) for p in judged}
        theirs = [p for p in measure_points(run, fmt, n, declared, variant, seed, kind=kind)
                  if (p.signal, p.level_dbfs) in keys]
        sq = np.array([p.reference.sqnr_db for p in theirs])
        if np.all(np.isfinite(sq)) and np.all(np.isfinite(mine)) and np.mean(np.abs(sq - mine)) <= MATCH_DB:
            return code
    return "precision"


def shift_error(judged: list[Point], run: Callable, fmt: QFormat, n: int, declared: FixedScaling,
                seed: int, kind: str = "fft") -> int | None:
    """Return k != 0 when the backend's outputs times 2**k match the exact DFT (its real
    output shift is the declared one plus k) far better than as declared, else None.

    Tried on each judged noise level: the best k must bring the SQNR within 6 dB of the
    reference's and at least 10 dB above k = 0.
    """
    for point in judged:
        x = test_signal("noise", n, point.level_dbfs, fmt, seed, kind)
        y, shift = read_output(run(x.copy()), fmt, n, declared.shift_at(n), kind)
        exact = exact_output(x, shift, kind, n)
        got = y[:, 0].astype(np.longdouble) + 1j * y[:, 1].astype(np.longdouble)
        scores = {k: sqnr_db(exact, got * np.longdouble(2.0) ** k) for k in range(-fmt.bits, fmt.bits + 1)}
        best = max(scores, key=lambda k: scores[k])
        if best != 0 and scores[best] >= point.reference.sqnr_db - 6.0 and scores[best] >= scores[0] + 10.0:
            return best
    return None


def opposite_sign(judged: list[Point], run: Callable, fmt: QFormat, n: int, declared: FixedScaling, seed: int,
                  kind: str = "fft") -> bool:
    """Return True when the backend's outputs match the transform of the opposite exponent
    sign (:func:`~fftgauge.harness.fixed.measure.opposite_sign_output`) within 6 dB of the
    reference's SQNR and at least 10 dB better than the transform asked for, on every judged
    noise level."""
    if not judged:
        return False
    for point in judged:
        x = test_signal("noise", n, point.level_dbfs, fmt, seed, kind)
        y, shift = read_output(run(x.copy()), fmt, n, declared.shift_at(n), kind)
        got = y[:, 0].astype(np.longdouble) + 1j * y[:, 1].astype(np.longdouble)
        other = sqnr_db(opposite_sign_output(x, shift, kind, n), got)
        if not (other >= point.reference.sqnr_db - 6.0 and other >= sqnr_db(exact_output(x, shift, kind, n), got) + 10.0):
            return False
    return True
