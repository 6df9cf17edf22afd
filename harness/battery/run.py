"""The correctness battery's engine: cases x backends, run in worker processes, rows
streamed to a results file.

:func:`run_battery` is what ``fftgauge check`` and the Python API call. For each backend it
starts a :class:`~fftgauge.harness.execution.worker.Worker` and asks it which cases the backend claims (the
others become ``skip`` rows with the reason); the backends are asked in parallel. Then every
check of every claimed case runs in a worker (:func:`run_case_job`), one case per call with
a timeout, so a crash or a hang becomes ``error`` rows and the run goes on.

How the work is spread over the cores
-------------------------------------
One *lane* per core (a thread of the main process driving one worker process at a time)
takes *batches* from a shared :class:`BatchQueue` until none is left. A batch is every
claimed case of one backend and one size (all kinds, precisions and normalisations), so
the caches a worker keeps per size (tables of roots of unity, closed-form pairs, a
library's plans and twiddles) serve the whole batch. Each backend's batches go largest
size first. A lane stays on its backend while it has batches, then starts the next backend
no lane has started (with the worker that described it), and at the end joins the backend
with the most batches left, with a worker of its own: the lanes pull work as they finish,
so no core waits while another has a long queue, the run ends on the smallest sizes, and
few workers are started (about one per backend, plus one per join).

Each worker caps its BLAS thread pools at ``BatteryRequest.threads`` (one by default): the
battery already keeps every core busy with one worker process each, and a BLAS library
that starts a thread per core in every worker (the ``direct`` backend's matrix products,
four calls at once in the ``concurrent`` check) makes their spinning threads fight over the
cores (measured ten times slower with two workers on two cores).
"""

from __future__ import annotations

import dataclasses
from collections import deque
from typing import Any, Sequence

from fftgauge.harness.execution import jobs
from fftgauge.harness.cases import Case
from fftgauge.backends.registry import require_unique_labels
from fftgauge.harness.execution.dispatch import Progress, describe_cases
from fftgauge.harness.errors import BackendFailure, UsageError
from fftgauge.harness.results import ResultsWriter, envelope
from fftgauge.harness.battery.lanes import (  # noqa: F401 - Lane, RowSink, drive_lanes and the two times re-exported
    JOIN_POLL_SECONDS, STOP_WAIT_SECONDS, Batch, Lane, RowSink, WorkQueue, battery_workers, describe_in_parallel,
    drive_lanes, lane_parallelism, raise_if_stopped, run_lanes,
)
from fftgauge.harness.battery.budget import probe_sizes, time_reason
from fftgauge.harness.battery.unclaimed import unclaim_size_classes
from fftgauge.harness.battery.size_patterns import size_patterns
from fftgauge.harness.battery.request import DEFAULT_CASE_TIMEOUT_SECONDS, BatteryRequest  # noqa: F401 - re-exported
from fftgauge.harness.rows import error_rows, skip_rows

CHECK_SCHEMA = "fftgauge-check/1"

#: The ``check`` name of the single row that stands for a case the backend does not claim.
SKIPPED_CASE_CHECK = "all"


def build_cases(req: BatteryRequest, kinds: Sequence[str]) -> list[Case]:
    """Return the cases of ``req`` for the given kinds, in a stable order (kind, dtype, norm, n)."""
    return [Case(k, d, n, norm) for k in kinds for d in req.dtypes for norm in req.norms for n in req.sizes]


class BatchQueue(WorkQueue):
    """The 1-D battery's work: per backend, its batches (every claimed case of one size) largest
    size first; a lane joins another backend only when it has at least two batches left (a
    lane that joins a backend starts a worker for it, which a single batch, the backend's
    smallest size, does not repay). Thread-safe (:class:`~fftgauge.harness.battery.lanes.WorkQueue`).
    """

    def __init__(self, req: BatteryRequest, claims: dict[str, dict[str, Any]], cases: list[Case]):
        left: dict[str, deque[Batch]] = {}
        for spec in req.specs:
            by_size: dict[int, list[int]] = {}
            for i, reason in enumerate(claims[spec].reasons):
                if reason is None:
                    by_size.setdefault(cases[i].n, []).append(i)
            left[spec] = deque(Batch(spec, claims[spec].label, claims[spec].capabilities,
                                     tuple(by_size[n])) for n in sorted(by_size, reverse=True))
        super().__init__(list(req.specs), left, join_min=2)


def case_runner(cases: list[Case], req: BatteryRequest, check_names: list[str] | None, batches: WorkQueue) -> Any:
    """Return ``run_one(worker, batch, index)`` for :func:`~fftgauge.harness.battery.lanes.work_lane`:
    the rows of case ``cases[index]`` run in ``worker`` (``error`` rows when the worker crashed,
    hung or raised; None when it was killed because the run is stopping), the request's
    criteria applied, and the row of processes left running beside them."""
    from fftgauge.harness.battery.checks import CHECKS
    from fftgauge.harness.battery.criteria import apply_limits

    names = list(check_names or CHECKS)

    def run_one(worker: Any, batch: Batch, index: int) -> list[dict] | None:
        case = cases[index]
        try:
            rows = worker.call(jobs.run_case_job, (case.kind, case.dtype, case.n, case.norm), req.seed, names,
                               req.threads or 1, timeout_seconds=req.timeout_seconds)
        except BackendFailure as exc:
            if batches.stopped:  # killed because the run is stopping: the case did not finish
                return None
            rows = [row.as_dict() for row in error_rows(batch.label, case, names, str(exc))]
        return (apply_limits(rows, req.limits, getattr(batch.capabilities, "conventions", None))
                + leftover_rows(batch.label, case, worker.left_running))

    return run_one


def leftover_rows(label: str, case: Case, count: int) -> list[dict]:
    """Return the row for a case whose job left ``count`` processes running (none when 0): an
    ``error`` row of check :data:`SKIPPED_CASE_CHECK` beside the case's own rows, saying so
    (:func:`~fftgauge.harness.execution.crash.leftover_text`; the worker ended them)."""
    from fftgauge.harness.execution.crash import leftover_text

    if count <= 0:
        return []
    message = f"the case's checks ran, but {leftover_text(count)}"
    return [row.as_dict() for row in error_rows(label, case, [SKIPPED_CASE_CHECK], message)]


def _describe_all(workers: dict[str, Any], req: BatteryRequest, cases: list[Case],
                  parallel: int) -> dict[str, dict[str, Any]]:
    """Return :func:`fftgauge.harness.execution.dispatch.describe_cases` for every SPEC, asked ``parallel`` at a time.

    Raises
    ------
    UsageError
        The first SPEC's (in the order asked) that cannot be loaded or fails to describe itself.
    """
    def describe(spec: str) -> dict[str, Any]:
        claims = describe_cases(workers[spec], spec, cases, req.max_n_pure_python, req.timeout_seconds)
        return with_time_reasons(workers[spec], claims, req, cases)

    return describe_in_parallel(list(req.specs), describe, parallel)


def probe_cases(claims: Any, cases: list[Case]) -> list[Case]:
    """Return the cases whose single calls estimate a backend's cost (:mod:`.budget`): one kind,
    precision and normalisation it claims (float64 and backward where it can), at the sizes
    :func:`~fftgauge.harness.battery.budget.probe_sizes` picks from its claimed ones."""
    claimed = [c for c, reason in zip(cases, claims.reasons) if reason is None]
    if not claimed:
        return []
    kind = claimed[0].kind
    dtypes = {c.dtype for c in claimed if c.kind == kind}
    dtype = "float64" if "float64" in dtypes else sorted(dtypes)[0]
    norms = {c.norm for c in claimed if (c.kind, c.dtype) == (kind, dtype)}
    norm = "backward" if "backward" in norms else sorted(norms)[0]
    sizes = probe_sizes([c.n for c in claimed if (c.kind, c.dtype, c.norm) == (kind, dtype, norm)])
    return [Case(kind, dtype, n, norm) for n in sizes]


def with_time_reasons(worker: Any, claims: Any, req: BatteryRequest, cases: list[Case]) -> Any:
    """Return ``claims`` with the cases whose estimated duration exceeds the budget marked as
    skipped for time (:func:`~fftgauge.harness.battery.budget.time_reason`).

    The budget is ``req.case_budget_seconds``, or ``req.reference_budget_seconds`` for a
    pure-Python reference; a probe that fails (the backend crashed or hung) leaves the claims
    as they are: the cases then run and show what happens.
    """
    budget = req.case_budget_seconds
    if req.reference_budget_seconds is not None and claims.capabilities.pure_python:
        budget = req.reference_budget_seconds
    probe = probe_cases(claims, cases)
    if not budget or not probe:
        return claims
    try:
        probes = worker.call(jobs.call_seconds, [(c.kind, c.dtype, c.n, c.norm) for c in probe], req.seed,
                             req.threads or 1, timeout_seconds=req.timeout_seconds)
    except BackendFailure:
        return claims
    reasons = tuple(reason if reason is not None else time_reason(claims.label, probes, case, budget)
                    for case, reason in zip(cases, claims.reasons))
    return dataclasses.replace(claims, reasons=reasons)


def unclaimed_case_rows(req: BatteryRequest, claims: dict[str, dict[str, Any]], cases: list[Case]) -> list[dict]:
    """Return one ``skip`` row per case a backend does not claim (the reason as its message);
    in a run that does not name its kinds, none for a kind the backend never computes (the
    contract's default is every kind the backend supports)."""
    return [row.as_dict() for spec in req.specs for case, reason in zip(cases, claims[spec].reasons)
            if reason is not None and (req.kinds is not None or claims[spec].claims_kind(case.kind))
            for row in skip_rows(claims[spec].label, case, [SKIPPED_CASE_CHECK], reason)]


def sort_battery_rows(rows: list[dict], req: BatteryRequest, claims: dict[str, dict[str, Any]], order: list[str]) -> None:
    """Sort rows in place: backend (as asked), kind, dtype, norm, n, check (battery order)."""
    backend_pos = {claims[spec].label: i for i, spec in enumerate(req.specs)}
    check_pos = {name: i for i, name in enumerate([SKIPPED_CASE_CHECK] + order)}
    kinds = ("fft", "ifft", "rfft", "irfft")
    rows.sort(key=lambda r: (backend_pos.get(r["backend"], 0), kinds.index(r["kind"]), r["dtype"], r["norm"],
                             r["n"], check_pos.get(r["check"], len(check_pos))))


def finish_battery_rows(doc: dict[str, Any], req: BatteryRequest, claims: dict[str, Any]) -> None:
    """Put a run's rows in their final form, in place: unclaimed size classes folded, rows
    sorted (:func:`sort_battery_rows`), ``size_patterns`` added (an optional field, docs/reference.md)."""
    from fftgauge.harness.battery.checks import CHECKS

    doc["rows"][:] = unclaim_size_classes(doc["rows"], doc["backends"])
    sort_battery_rows(doc["rows"], req, claims, list(CHECKS))
    doc["size_patterns"] = size_patterns(doc["rows"])


def battery_envelope(req: BatteryRequest, claims: dict[str, Any], kinds: Sequence[str],
                     check_names: list[str] | None) -> dict[str, Any]:
    """Return the ``fftgauge-check/1`` envelope of a run (rows empty): reference methods, the
    backends' records and the request (the local run's and the cluster's)."""
    from fftgauge.harness.battery.checks import CHECKS
    from fftgauge.harness.battery.reference import reference_method

    return envelope(CHECK_SCHEMA, req.seed, extra={
        "reference": {dtype: reference_method(dtype) for dtype in req.dtypes},
        "backends": {claims[s].label: claims[s].record(s) for s in req.specs},
        "request": {"kinds": list(kinds), "dtypes": list(req.dtypes), "norms": list(req.norms),
                    "sizes": list(req.sizes), "checks": check_names or list(CHECKS),
                    **({"limits": {lim.check: lim.as_dict() for lim in req.limits}} if req.limits else {})},
    })


def run_battery(req: BatteryRequest, json_path: str | None = None, quiet: bool = True) -> dict[str, Any]:
    """Run the battery and return the ``fftgauge-check/1`` document (rows included).

    Rows are streamed to ``json_path`` (when given) as cases finish, so an interrupted run
    keeps what it finished; the envelope's ``complete`` says whether the run finished.

    Raises
    ------
    UsageError
        When a backend SPEC cannot be loaded or a check name is unknown.
    RunStopped
        When SIGINT (or SIGTERM/SIGHUP inside :func:`~fftgauge.harness.shutdown.stop_on_signals`)
        stopped the run: its ``doc`` holds what finished (written, ``complete: false``).
    fftgauge.harness.results.ResultsWriteError
        When the results file could not be written (its ``doc`` holds every row; the message
        names the fallback file).
    """
    from fftgauge.harness.battery.checks import CHECKS

    if req.checks:
        unknown = [c for c in req.checks if c not in CHECKS]
        if unknown:
            raise UsageError(f"unknown check {unknown[0]!r}; checks: {', '.join(CHECKS)}")
    check_names = list(req.checks) if req.checks else None
    kinds = req.kinds or ("fft", "ifft", "rfft", "irfft")
    cases = build_cases(req, kinds)
    parallel = lane_parallelism()
    with battery_workers(list(req.specs), req.threads, parallel) as workers:
        claims = _describe_all(workers, req, cases, parallel)
        require_unique_labels({spec: claims[spec].label for spec in req.specs})
        doc = battery_envelope(req, claims, kinds, check_names)
        writer = ResultsWriter(json_path, doc)
        writer.add(unclaimed_case_rows(req, claims, cases))
        batches = BatchQueue(req, claims, cases)
        progress = Progress(total=batches.total_cases, quiet=quiet)
        stop = run_lanes(workers, batches, req, writer, progress, case_runner(cases, req, check_names, batches),
                         lambda batch, index: f"{batch.label} {cases[index].label()}",
                         lambda: finish_battery_rows(doc, req, claims))
    raise_if_stopped(stop, doc)
    return doc


