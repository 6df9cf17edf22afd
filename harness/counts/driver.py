"""The program run under cachegrind to count one case: load the backend from its SPEC, plan the
case, make its seeded input, call the transform :data:`WARMUP_CALLS` times, then ``K`` times.

Run as ``python -s driver.py SPEC KIND DTYPE N NORM SEED K THREADS`` for a 1-D case, and
``... THREADS SHAPE AXES LAYOUT`` (e.g. ``16x8 0,1 F``) for a shaped one, whose input is laid
out as its layout says before the calls (:func:`case_args`,
:func:`fftgauge.harness.counts.cachegrind.driver_argv`). Two runs, of ``K`` and ``2K``
calls, differ by ``K`` transforms alone: the start-up (interpreter, imports, planning, input,
warm-up) is the same in both and cancels. Exit status 0 when the calls ran; 3 with one line on
standard error when the backend could not be loaded, refused the case or failed.
"""

from __future__ import annotations

import os
import sys

#: Untimed calls before the counted ones (first-call costs: lazy tables, caches, buffers).
WARMUP_CALLS = 3


def pin_entropy(seed: int) -> None:
    """Make ``os.urandom`` return a fixed stream drawn from ``seed`` (SHA-256 of a counter), in
    this process; return nothing.

    Start-up code seeds generators from the operating system's entropy (importing
    ``numpy.random`` seeds its global generator with 128 random bits; ``random`` and
    ``tempfile`` seed theirs too): a seed with leading zero bytes is a shorter integer, so
    each fresh process counted a few hundred to a few thousand instructions more or less
    (measured: run totals 651,489,420-651,493,908 for the same run of 10 transforms, differing in
    ``PyLong_*``, ``MT19937.__init__`` and the dict lookups of those integers). Must run before
    ``random`` is imported (it keeps its own reference to ``os.urandom``).
    """
    import hashlib

    counter = [0]

    def urandom(size: int) -> bytes:
        out = b""
        while len(out) < size:
            out += hashlib.sha256(f"{seed}:{counter[0]}".encode()).digest()
            counter[0] += 1
        return out[:size]

    os.urandom = urandom


def case_args(case) -> list[str]:
    """Return the driver's case arguments of a 1-D case (``KIND DTYPE N NORM``) or of a shaped
    one (``KIND DTYPE N NORM`` with N the points of one transform, then ``SHAPE AXES LAYOUT``
    after the run's ``SEED K THREADS``: see :func:`parse_case`)."""
    if hasattr(case, "shape"):
        return [case.kind, case.dtype, str(case.points), case.norm]
    return [case.kind, case.dtype, str(case.n), case.norm]


def shape_args(case) -> list[str]:
    """Return the trailing ``SHAPE AXES LAYOUT`` arguments of a shaped case (``16x8 0,1 F``), none for a 1-D one."""
    if not hasattr(case, "shape"):
        return []
    return ["x".join(str(n) for n in case.shape), ",".join(str(a) for a in case.axes), case.layout]


def parse_case(kind: str, dtype: str, n: str, norm: str, shaped: list[str]):
    """Return the case the driver's arguments name: a 1-D ``Case``, or with ``shaped``
    (``[SHAPE, AXES, LAYOUT]``) a ``ShapeCase``.

    Raises
    ------
    ValueError
        For arguments no case can be built from.
    """
    if not shaped:
        from fftgauge.harness.cases import Case

        return Case(kind, dtype, int(n), norm)
    from fftgauge.harness.shapes.case import ShapeCase

    shape, axes, layout = shaped
    return ShapeCase(kind, dtype, tuple(int(v) for v in shape.split("x")), tuple(int(a) for a in axes.split(",")),
                     layout, norm)


def prepared_plan(backend, case, seed: int):
    """Return ``(plan, input)`` of a case: a 1-D case's plan in the backend's declared input
    convention and its seeded input prepared; a shaped case's plan
    (:class:`~fftgauge.harness.shapes.timed.LaidOutPlan`) and its seeded input laid out as the
    case's layout and prepared. The inputs are those ``fftgauge time`` and the gate time.

    Raises
    ------
    ValueError
        When the backend does not support the case.
    Exception
        Whatever planning or the backend raises.
    """
    import numpy as np

    from fftgauge.harness.shapes.timed import LaidOutPlan, timing_input, unsupported

    reason = unsupported(backend, case)
    if reason is not None:
        raise ValueError(f"the backend does not support {case.label()}: {reason}")
    if hasattr(case, "shape"):
        plan = LaidOutPlan(backend.plan_shaped(case))
    else:
        from fftgauge.harness.battery.conventions import declared_input_plan

        plan = declared_input_plan(backend, backend.plan(case))
    return plan, plan.prepare(np.array(timing_input(case, seed), copy=True))


def run_calls(spec: str, kind: str, dtype: str, n: int, norm: str, seed: int, calls: int, threads: int,
              shaped: list[str] | None = None) -> None:
    """Plan the case (shaped with ``shaped`` = ``[SHAPE, AXES, LAYOUT]``) and run the warm-up
    and ``calls`` transforms; return nothing.

    Raises
    ------
    Exception
        Whatever loading, planning or the backend raises.
    """
    from fftgauge.backends.registry import load_backend

    backend = load_backend(spec, threads)
    case = parse_case(kind, dtype, str(n), norm, list(shaped or ()))
    plan, x_in = prepared_plan(backend, case, seed)
    try:
        for _ in range(WARMUP_CALLS):
            plan.execute(x_in)
        for _ in range(calls):
            plan.execute(x_in)
    finally:
        plan.close()


def main(argv: list[str]) -> int:
    """Run the driver on the command line ``argv`` (without the program name); return the exit status."""
    try:
        spec, kind, dtype, n, norm, seed, calls, threads, *shaped = argv
        if len(shaped) not in (0, 3):
            raise ValueError(f"expected SHAPE AXES LAYOUT after THREADS, got {' '.join(shaped)}")
        pin_entropy(int(seed))
        run_calls(spec, kind, dtype, int(n), norm, int(seed), int(calls), int(threads), shaped)
    except BaseException as exc:  # one line for the parent, whatever went wrong
        text = " ".join(str(exc).split()) or type(exc).__name__
        print(f"fftgauge-count-driver: {type(exc).__name__}: {text}", file=sys.stderr)
        return 3
    return 0


if __name__ == "__main__":
    # this folder is the first import path of a script; its modules (measure, table, ...) must
    # not stand in for others of the same name
    if sys.path and sys.path[0] == os.path.dirname(os.path.abspath(__file__)):
        sys.path.pop(0)
    sys.exit(main(sys.argv[1:]))
