"""The timing runner's engine: cases x backends, timed in worker processes, rows streamed.

:func:`run_timing` is what ``fftgauge time`` and the Python API call. Every backend gets its
own :class:`~harness.worker.Worker`; the cases are taken one at a time and, for each case,
every backend is timed in turn (in a shuffled order, seeded), so slow drift of the machine
(thermal, other tenants) is spread over all backends instead of landing on the one that
happened to run last. Backends are never timed at the same time: two timings in parallel
on a 2-core machine would measure each other.
"""

from __future__ import annotations

import random
from dataclasses import dataclass
from typing import Any

from harness.cases import KINDS, Case
from harness.errors import BackendFailure, UnsupportedCase, UsageError
from harness.dispatch import Progress, describe_cases
from harness.results import ResultsWriter, envelope

TIME_SCHEMA = "fftgauge-time/1"
DEFAULT_CASE_TIMEOUT_SECONDS = 120.0


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
    samples: int = 25
    budget_seconds: float = 2.0
    cold_cache: bool = False
    measure_memory: bool = True
    timeout_seconds: float = DEFAULT_CASE_TIMEOUT_SECONDS
    max_n_pure_python: int | None = None
    cpus: tuple[int, ...] | None = None

    def timer_options(self) -> dict[str, Any]:
        """Return the options :func:`harness.timing.time_case` takes."""
        return {"samples": self.samples, "budget_seconds": self.budget_seconds, "cold_cache": self.cold_cache,
                "measure_memory": self.measure_memory, "threads": self.threads, "seed": self.seed}


def placeholder_row(label: str, case: Case, threads: int, status: str, message: str) -> dict[str, Any]:
    """Return a ``fftgauge-time/1`` row that holds no time: a ``skip`` or an ``error``."""
    return {"backend": label, "kind": case.kind, "dtype": case.dtype, "n": case.n, "threads": threads,
            "plan_seconds": None, "seconds": None, "seconds_low": None, "seconds_high": None, "samples": 0,
            "loops": 0, "flops": None, "gflops": None, "ns_per_nlogn": None, "peak_bytes": None,
            "in_place": None, "norm": case.norm, "status": status, "message": message}


def _time_one(worker: Any, label: str, case: Case, req: TimingRequest) -> dict[str, Any]:
    try:
        return worker.call("harness.timing:time_case", (case.kind, case.dtype, case.n, case.norm),
                           req.timer_options(), timeout_seconds=req.timeout_seconds)
    except UnsupportedCase as exc:
        return placeholder_row(label, case, req.threads, "skip", str(exc))
    except BackendFailure as exc:
        return placeholder_row(label, case, req.threads, "error", str(exc))


def run_timing(req: TimingRequest, json_path: str | None = None, quiet: bool = True) -> dict[str, Any]:
    """Time every case of ``req`` on every backend; return the ``fftgauge-time/1`` document.

    Rows are streamed to ``json_path`` as they finish.

    Raises
    ------
    UsageError
        When a backend SPEC cannot be loaded.
    """
    from harness.affinity import pinned

    with pinned(req.cpus) as cpus:
        return _run_timing_pinned(req, json_path, quiet, cpus)


def _run_timing_pinned(req: TimingRequest, json_path: str | None, quiet: bool,
                       cpus: tuple[int, ...] | None) -> dict[str, Any]:
    """:func:`run_timing`'s body, run with this thread pinned to ``cpus`` (recorded in the document)."""
    from harness.worker import Worker

    kinds = req.kinds or KINDS
    cases = [Case(k, d, n, norm) for k in kinds for d in req.dtypes for norm in req.norms for n in req.sizes]
    workers = {spec: Worker(spec, threads=req.threads) for spec in req.specs}
    try:
        claims = {spec: describe_cases(workers[spec], spec, cases, req.max_n_pure_python, req.timeout_seconds)
                  for spec in req.specs}
        doc = envelope(TIME_SCHEMA, req.seed, extra={
            "threads": req.threads, "pinned_cpus": list(cpus) if cpus else None,
            "backends": {claims[s]["label"]: {"spec": s, **claims[s]["describe"]} for s in req.specs},
            "request": {"kinds": list(kinds), "dtypes": list(req.dtypes), "norms": list(req.norms),
                        "sizes": list(req.sizes), "samples": req.samples, "budget_seconds": req.budget_seconds,
                        "cold_cache": req.cold_cache},
        })
        writer = ResultsWriter(json_path, doc)
        progress = Progress(total=len(cases) * len(req.specs), quiet=quiet, desc="timing")
        order = random.Random(req.seed)
        try:
            for index, case in enumerate(cases):
                specs = list(req.specs)
                order.shuffle(specs)
                for spec in specs:
                    label, reason = claims[spec]["label"], claims[spec]["reasons"][index]
                    if reason is not None:
                        row = placeholder_row(label, case, req.threads, "skip", reason)
                    else:
                        row = _time_one(workers[spec], label, case, req)
                    writer.add([row])
                    progress.advance(note=f"{label} {case.label()}")
        finally:
            progress.close()
            writer.close()
    finally:
        for worker in workers.values():
            worker.close()
    position = {claims[spec]["label"]: i for i, spec in enumerate(req.specs)}
    doc["rows"].sort(key=lambda r: (KINDS.index(r["kind"]), r["dtype"], r["norm"], r["n"], position[r["backend"]]))
    return doc
