"""The timing runner's engine: cases x backends, timed in worker processes, rows streamed.

:func:`run_timing` is what ``fftgauge time`` and the Python API call. Every backend gets its
own :class:`~fftgauge.harness.execution.worker.Worker`, and the whole run is pinned to one CPU
(:mod:`fftgauge.harness.timing.affinity`). Backends are never timed at the same time: two timings in
parallel on a 2-core machine would measure each other.

Rounds. A machine shared with others does not keep one speed: on the project's virtual
machine the same FFT runs 10-25% slower for stretches of one to several seconds, several
times a minute. Timed in one go (25 samples of about 1 ms), a case sees a 50 ms snapshot of
that, and whether the snapshot fell in a slow stretch decides its median. So each case's
samples are split into :attr:`TimingRequest.rounds` rounds (default 10); the cases of a
window of :data:`WINDOW_CASES` cases are timed round after round, every (case, backend) once
per round in a new seeded random order, so each case's samples are spread over the
window's whole duration and over every backend's turns. The worker keeps the case's plan
between rounds (:func:`fftgauge.harness.timing.case_job.time_case`); the row is written when its last round
is done, so an interrupted run loses at most the window in progress.

Defaults: 100 samples in 10 rounds, at most 1 s of sampling per case. Measured on the
project's machine (``benchmarks/bench_timing.py``): five consecutive runs of numpy over
2^10..2^16 gave medians with a worst coefficient of variation of 2.9% with these settings,
and 11.7-18.2% with 25 samples in 5 rounds, because more samples over more rounds spread
each case over a longer stretch of the machine's time; the 204-case sweep stays under 90 s.
"""

from __future__ import annotations

import random
from dataclasses import dataclass
from typing import Any

from fftgauge.harness.execution import jobs
from fftgauge.harness.cases import KINDS, Case
from fftgauge.harness.errors import BackendFailure, UnsupportedCase, UsageError
from fftgauge.backends.registry import require_unique_labels
from fftgauge.harness.execution.dispatch import Progress, describe_cases
from fftgauge.harness.results import ResultsWriter, envelope
from fftgauge.harness.shapes.fields import case_fields, case_size, is_shaped, row_fields, row_order_key

TIME_SCHEMA = "fftgauge-time/1"
DEFAULT_CASE_TIMEOUT_SECONDS = 120.0
#: Rounds each case's samples are split into (see the module docstring).
DEFAULT_ROUNDS = 10
#: Samples per case, and the per-case sampling budget in seconds (see the module docstring).
DEFAULT_SAMPLES = 100
DEFAULT_BUDGET_SECONDS = 1.0
#: Cases timed together, round after round, before their rows are written.
WINDOW_CASES = 16


@dataclass(frozen=True)
class TimingRequest:
    """What to time: validated at the boundary (CLI or API), trusted here."""

    specs: tuple[str, ...]
    kinds: tuple[str, ...] | None
    dtypes: tuple[str, ...]
    sizes: tuple[int, ...]
    norms: tuple[str, ...] = ("backward",)
    seed: int = 1234
    threads: int = 1
    samples: int = DEFAULT_SAMPLES
    budget_seconds: float = DEFAULT_BUDGET_SECONDS
    cold_cache: bool = False
    measure_memory: bool = True
    timeout_seconds: float = DEFAULT_CASE_TIMEOUT_SECONDS
    max_n_pure_python: int | None = None
    cpus: tuple[int, ...] | None = None
    rounds: int = DEFAULT_ROUNDS
    #: Shaped cases (:class:`~fftgauge.harness.shapes.case.ShapeCase`): when given, these are
    #: timed instead of kinds x dtypes x norms x sizes.
    shape_cases: tuple = ()

    def timer_options(self, round_index: int = 0) -> dict[str, Any]:
        """Return the options :func:`fftgauge.harness.timing.case_job.time_case` takes for round ``round_index``."""
        return {"samples": self.samples, "budget_seconds": self.budget_seconds, "cold_cache": self.cold_cache,
                "measure_memory": self.measure_memory, "threads": self.threads, "seed": self.seed,
                "rounds": self.rounds, "round": round_index}


def placeholder_row(label: str, case: Any, threads: int, status: str, message: str) -> dict[str, Any]:
    """Return a ``fftgauge-time/1`` row that holds no time: a ``skip`` or an ``error`` (a
    shaped case's with its shape fields)."""
    return {"backend": label, "kind": case.kind, "dtype": case.dtype, "n": case_size(case), "threads": threads,
            "plan_seconds": None, "seconds": None, "seconds_low": None, "seconds_high": None, "samples": 0,
            "loops": 0, "flops": None, "gflops": None, "ns_per_nlogn": None, "peak_bytes": None,
            "in_place": None, "norm": case.norm, "status": status, "message": message, **row_fields(case)}


def _time_round(worker: Any, label: str, case: Case, req: TimingRequest, round_index: int) -> dict[str, Any] | None:
    """Run one round of ``case`` in ``worker``; return its row when the case is finished
    (a time, a skip or an error), None when more rounds are due."""
    try:
        return worker.call(jobs.time_case, case_fields(case),
                           req.timer_options(round_index), timeout_seconds=req.timeout_seconds)
    except UnsupportedCase as exc:
        return placeholder_row(label, case, req.threads, "skip", str(exc))
    except BackendFailure as exc:
        return placeholder_row(label, case, req.threads, "error", str(exc))


def run_timing(req: TimingRequest, json_path: str | None = None, quiet: bool = True,
               doc: dict[str, Any] | None = None) -> dict[str, Any]:
    """Time every case of ``req`` on every backend; return the ``fftgauge-time/1`` document.

    Rows are streamed to ``json_path`` as they finish (``-``: the document goes to standard
    output at the end; :class:`~fftgauge.harness.results.ResultsWriter`). The envelope's
    ``complete`` is false until the last case is done: a run stopped by an exception (Ctrl-C's
    KeyboardInterrupt, a signal's :class:`~fftgauge.harness.shutdown.StopRequested`, a
    failure) leaves the file, and ``doc`` when given (filled in place, rows sorted), holding
    the cases that finished with ``complete`` false, and the exception propagates.

    Raises
    ------
    UsageError
        When a backend SPEC cannot be loaded.
    ResultsWriteError
        When the results file could not be written (its ``doc`` holds every row; the rows
        are kept in a fallback file when possible).
    """
    from fftgauge.harness.timing.affinity import pinned

    doc = {} if doc is None else doc
    with pinned(req.cpus) as cpus:
        return _run_timing_pinned(req, json_path, quiet, cpus, doc)


def _run_timing_pinned(req: TimingRequest, json_path: str | None, quiet: bool,
                       cpus: tuple[int, ...] | None, doc: dict[str, Any]) -> dict[str, Any]:
    """:func:`run_timing`'s body, run with this thread pinned to ``cpus`` (recorded in the document)."""
    from fftgauge.harness.execution.worker import Worker

    kinds = req.kinds or KINDS
    cases = list(req.shape_cases) or [Case(k, d, n, norm) for k in kinds for d in req.dtypes for norm in req.norms
                                      for n in req.sizes]
    workers = {spec: Worker(spec, threads=req.threads) for spec in req.specs}
    position: dict[str, int] = {}
    try:
        claims = {spec: describe_cases(workers[spec], spec, cases, req.max_n_pure_python, req.timeout_seconds)
                  for spec in req.specs}
        require_unique_labels({spec: claims[spec].label for spec in req.specs})
        position.update({claims[spec].label: i for i, spec in enumerate(req.specs)})
        doc.update(envelope(TIME_SCHEMA, req.seed, extra={
            "complete": False, "threads": req.threads, "pinned_cpus": list(cpus) if cpus else None,
            "backends": {claims[s].label: claims[s].record(s) for s in req.specs},
            "request": {"kinds": list(kinds), "dtypes": list(req.dtypes), "norms": list(req.norms),
                        "sizes": list(req.sizes), "samples": req.samples, "budget_seconds": req.budget_seconds,
                        "cold_cache": req.cold_cache, "rounds": req.rounds,
                        **({"shapes": [c.label() for c in req.shape_cases]} if req.shape_cases else {})},
        }))
        writer = ResultsWriter(json_path, doc)
        progress = Progress(total=sum(not unclaimed_kind(req, claims[s], c) for s in req.specs for c in cases),
                            quiet=quiet, desc="timing")
        order = random.Random(req.seed)
        finished = False
        try:
            for first in range(0, len(cases), WINDOW_CASES):
                window = list(range(first, min(first + WINDOW_CASES, len(cases))))
                _time_window(window, cases, claims, workers, req, order, writer, progress)
            finished = True
        finally:
            progress.close()
            doc["rows"].sort(key=lambda r: (row_order_key(r), position[r["backend"]]))
            writer.close(complete=finished)
    finally:
        for worker in workers.values():
            worker.close()
    return doc


def unclaimed_kind(req: Any, claims: Any, case: Case) -> bool:
    """Return True when ``case`` is of a kind the backend never claimed in a run that did not
    name its kinds (``req.kinds`` None): such a case is no finding, it makes no row."""
    if is_shaped(case):
        return req.kinds is None and case.kind not in claims.capabilities.shaped_kinds
    return req.kinds is None and not claims.claims_kind(case.kind)


def _time_window(window: list[int], cases: list[Case], claims: dict[str, Any], workers: dict[str, Any],
                 req: TimingRequest, order: random.Random, writer: Any, progress: Any) -> None:
    """Time the cases of ``window`` (indices into ``cases``) on every backend, round after round;
    write each row as its case finishes."""
    pending = []
    for index in window:
        for spec in req.specs:
            label, reason = claims[spec].label, claims[spec].reasons[index]
            if unclaimed_kind(req, claims[spec], cases[index]):
                continue
            if reason is not None:
                writer.add([placeholder_row(label, cases[index], req.threads, "skip", reason)])
                progress.advance(note=f"{label} {cases[index].label()}")
            else:
                pending.append((index, spec))
    for round_index in range(req.rounds):
        order.shuffle(pending)
        for index, spec in list(pending):
            label = claims[spec].label
            row = _time_round(workers[spec], label, cases[index], req, round_index)
            if row is not None:
                writer.add([row])
                progress.advance(note=f"{label} {cases[index].label()}")
                pending.remove((index, spec))
