"""The program run under cachegrind to count one case: load the backend from its SPEC, plan the
case, make its seeded input, call the transform :data:`WARMUP_CALLS` times, then ``K`` times.

Run as ``python -s driver.py SPEC KIND DTYPE N NORM SEED K THREADS``
(:func:`fftgauge.harness.counts.cachegrind.driver_argv`). Two runs, of ``K`` and ``2K``
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


def run_calls(spec: str, kind: str, dtype: str, n: int, norm: str, seed: int, calls: int, threads: int) -> None:
    """Plan the case and run the warm-up and ``calls`` transforms; return nothing.

    Raises
    ------
    Exception
        Whatever loading, planning or the backend raises.
    """
    import numpy as np

    from fftgauge.backends.registry import load_backend
    from fftgauge.harness.battery.conventions import declared_input_plan
    from fftgauge.harness.battery.inputs import case_rng, random_input
    from fftgauge.harness.cases import Case

    backend = load_backend(spec, threads)
    case = Case(kind, dtype, n, norm)
    reason = backend.unsupported_reason(case)
    if reason is not None:
        raise ValueError(f"the backend does not support {case.label()}: {reason}")
    plan = declared_input_plan(backend, backend.plan(case))
    try:
        x_in = plan.prepare(np.array(random_input(case, case_rng(seed, case, "time")), copy=True))
        for _ in range(WARMUP_CALLS):
            plan.execute(x_in)
        for _ in range(calls):
            plan.execute(x_in)
    finally:
        plan.close()


def main(argv: list[str]) -> int:
    """Run the driver on the command line ``argv`` (without the program name); return the exit status."""
    try:
        spec, kind, dtype, n, norm, seed, calls, threads = argv
        pin_entropy(int(seed))
        run_calls(spec, kind, dtype, int(n), norm, int(seed), int(calls), int(threads))
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
