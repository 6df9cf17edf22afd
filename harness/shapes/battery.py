"""The shaped battery's engine: shaped cases x backends, in worker processes, rows streamed to
the same results file as the 1-D battery's.

:func:`run_check_request` is what ``fftgauge check`` calls: the 1-D battery
(:func:`fftgauge.harness.battery.run.run_battery`) for ``--sizes``, the shaped battery
(:func:`run_shaped_battery`) for ``--shapes``, both when both are given (1-D first, then the
shaped cases, in one results file). As in the 1-D battery every backend is described by a
worker of its own (which shaped cases it claims; the others become ``skip`` rows with the
reason), and every claimed case runs in a worker (:func:`fftgauge.harness.execution.jobs.run_shaped_case_job`)
with a timeout, so a crash or a hang becomes ``error`` rows and the run goes on. One lane per
core takes batches (every case of one backend and one shape: kinds, precisions, layouts) from
a shared queue, largest arrays first, driving one worker at a time (the 1-D battery's
:class:`~fftgauge.harness.battery.run.Lane`).
"""

from __future__ import annotations

import dataclasses
from collections import deque
from typing import Any

from fftgauge.harness.battery.lanes import (
    Batch, WorkQueue, battery_workers, describe_in_parallel, lane_parallelism, raise_if_stopped, run_lanes,
)
from fftgauge.harness.battery.request import BatteryRequest
from fftgauge.harness.errors import BackendFailure, UsageError
from fftgauge.harness.execution import jobs
from fftgauge.harness.rows import CheckRow
from fftgauge.harness.shapes.case import ShapeCase
from fftgauge.harness.shapes.fields import case_fields, row_order_key

__all__ = ["SHAPED_CASE_CHECK", "ShapedQueue", "line_request", "run_check_request", "run_shaped_battery",
           "shaped_check_names", "shaped_envelope", "sort_shaped_rows"]

#: The ``check`` name of the single row that stands for a shaped case not run (as the 1-D battery's).
SHAPED_CASE_CHECK = "all"


def shaped_check_names(req: BatteryRequest) -> list[str]:
    """Return the shaped checks a request asks for: its ``--checks`` that are shaped checks, or all."""
    from fftgauge.harness.shapes.checks import SHAPED_CHECKS

    if not req.checks:
        return list(SHAPED_CHECKS)
    return [c for c in req.checks if c in SHAPED_CHECKS]


def case_row(label: str, case: ShapeCase, status: str, message: str, check: str = SHAPED_CASE_CHECK) -> dict:
    """Return the dict of one ``skip``/``error`` row standing for a whole shaped case (or one check of it)."""
    from fftgauge.harness.shapes.context import shaped_row

    return shaped_row(label, case, check, status, message=message).as_dict()


class ShapedQueue(WorkQueue):
    """The shaped battery's work: per backend, batches (every claimed case of one shape) largest
    array first; a lane that finished its own backend joins any with batches left. Thread-safe
    (:class:`~fftgauge.harness.battery.lanes.WorkQueue`)."""

    def __init__(self, specs: list[str], claimed: dict[str, list[int]], cases: list[ShapeCase],
                 labels: dict[str, str] | None = None, capabilities: dict[str, Any] | None = None):
        left: dict[str, deque[Batch]] = {}
        for spec in specs:
            by_shape: dict[tuple, list[int]] = {}
            for i in claimed[spec]:
                by_shape.setdefault((cases[i].shape, cases[i].axes), []).append(i)
            order = sorted(by_shape, key=lambda key: -cases[by_shape[key][0]].input_bytes())
            left[spec] = deque(Batch(spec, (labels or {}).get(spec, spec), (capabilities or {}).get(spec),
                                     tuple(by_shape[key])) for key in order)
        super().__init__(list(specs), left, join_min=1)


def run_case(worker: Any, label: str, case: ShapeCase, req: BatteryRequest, names: list[str]) -> list[dict]:
    """Return the rows of one shaped case run in ``worker``: its checks' rows, or an ``error``
    row per check when the worker crashed, hung or raised; an ``error`` row of check ``all``
    beside them when the job left processes running."""
    from fftgauge.harness.execution.crash import leftover_text

    try:
        rows = worker.call(jobs.run_shaped_case_job, case_fields(case), req.seed, names, req.threads or 1,
                           timeout_seconds=req.timeout_seconds)
    except BackendFailure as exc:
        rows = [case_row(label, case, "error", str(exc), check=name) for name in names]
    if worker.left_running > 0:
        rows.append(case_row(label, case, "error", f"the case's checks ran, but {leftover_text(worker.left_running)}"))
    return rows


def _request_record(req: BatteryRequest, names: list[str]) -> dict[str, Any]:
    return {"shapes": [spec.label() for spec in req.shapes], "layouts": list(req.layouts),
            "shape_kinds": sorted({c.kind for c in req.shape_cases}), "shape_checks": names}


def run_shaped_battery(req: BatteryRequest, json_path: str | None = None, quiet: bool = True,
                       doc: dict[str, Any] | None = None) -> dict[str, Any]:
    """Run the shaped cases of ``req`` and return the ``fftgauge-check/1`` document.

    ``doc`` is the document of a 1-D run of the same request to add the shaped rows to (its
    rows are kept; without it a new envelope is made). Rows are streamed to ``json_path``.

    Raises
    ------
    UsageError
        When a backend SPEC cannot be loaded or describe itself.
    RunStopped
        When a signal stopped the run (its ``doc`` holds what finished, ``complete: false``).
    fftgauge.harness.results.ResultsWriteError
        When the results file could not be written.
    """
    from fftgauge.backends.registry import require_unique_labels
    from fftgauge.harness.battery.criteria import apply_limits
    from fftgauge.harness.execution.dispatch import Progress, describe_cases
    from fftgauge.harness.results import ResultsWriter

    cases = list(req.shape_cases)
    names = shaped_check_names(req)
    parallel = lane_parallelism()
    with battery_workers(list(req.specs), req.threads, parallel) as workers:
        claims = describe_in_parallel(list(req.specs), lambda spec: describe_cases(
            workers[spec], spec, cases, req.max_n_pure_python, req.timeout_seconds), parallel)
        require_unique_labels({spec: claims[spec].label for spec in req.specs})
        doc = shaped_envelope(req, claims, names, doc)
        writer = ResultsWriter(json_path, doc)
        claimed: dict[str, list[int]] = {}
        skipped = []
        for spec in req.specs:
            claimed[spec] = [i for i, reason in enumerate(claims[spec].reasons) if reason is None]
            skipped += [case_row(claims[spec].label, c, "skip", reason)
                        for c, reason in zip(cases, claims[spec].reasons) if reason is not None]
        writer.add(skipped)
        labels = {spec: claims[spec].label for spec in req.specs}
        queue = ShapedQueue(list(req.specs), claimed, cases, labels,
                            {spec: claims[spec].capabilities for spec in req.specs})
        progress = Progress(total=queue.total_cases, quiet=quiet, desc="checking shapes")

        def run_one(worker: Any, batch: Any, index: int) -> list[dict] | None:
            rows = run_case(worker, batch.label, cases[index], req, names)
            if queue.stopped:
                return None
            return apply_limits(rows, req.limits, getattr(batch.capabilities, "conventions", None))

        stop = run_lanes(workers, queue, req, writer, progress, run_one,
                         lambda batch, index: f"{batch.label} {cases[index].label()}",
                         lambda: sort_shaped_rows(doc, req, claims))
    raise_if_stopped(stop, doc)
    return doc


def shaped_envelope(req: BatteryRequest, claims: dict[str, Any], names: list[str],
                    doc: dict[str, Any] | None = None) -> dict[str, Any]:
    """Return ``doc`` (a 1-D run's document; None: a new ``fftgauge-check/1`` envelope) with the
    shaped run's reference, backends and request added (rows kept)."""
    from fftgauge.harness.battery.run import CHECK_SCHEMA
    from fftgauge.harness.results import envelope
    from fftgauge.harness.shapes.reference import shaped_reference_method

    if doc is None:
        doc = envelope(CHECK_SCHEMA, req.seed, extra={
            "reference": {}, "backends": {}, "request": {"kinds": [], "dtypes": list(req.dtypes),
                                                         "norms": list(req.norms), "sizes": [],
                                                         "checks": list(req.checks or names)}})
    doc.setdefault("reference", {}).update(
        {f"{d} (shapes)": f"{shaped_reference_method(d)} axis by axis" for d in req.dtypes})
    doc.setdefault("backends", {}).update({claims[s].label: claims[s].record(s) for s in req.specs})
    doc.setdefault("request", {}).update(_request_record(req, names))
    return doc


def sort_shaped_rows(doc: dict[str, Any], req: BatteryRequest, claims: dict[str, Any]) -> None:
    """Put ``doc``'s rows in their final order: 1-D rows first, then by backend (in the order
    asked) and, for shaped rows, :func:`~fftgauge.harness.shapes.fields.row_order_key`."""
    position = {claims[s].label: i for i, s in enumerate(req.specs)}
    doc["rows"].sort(key=lambda r: (bool(r.get("shape")), position.get(r["backend"], 0))
                     + (row_order_key(r) if r.get("shape") else ()))


def line_request(req: BatteryRequest) -> BatteryRequest | None:
    """Return the 1-D part of a request with shapes (its sizes, the 1-D kinds of its kinds and
    the 1-D checks of its checks), or None when it asks no 1-D case."""
    from fftgauge.harness.battery.checks import CHECKS
    from fftgauge.harness.shapes.case import family_kind

    if not req.sizes:
        return None
    kinds = tuple(dict.fromkeys(family_kind(k, 1) for k in req.kinds)) if req.kinds else None
    checks = tuple(c for c in req.checks if c in CHECKS) if req.checks else None
    if checks == ():
        return None
    return dataclasses.replace(req, kinds=kinds, checks=checks)


def run_check_request(req: BatteryRequest, json_path: str | None = None, quiet: bool = True) -> dict[str, Any]:
    """Run what a ``check`` request asks: the 1-D battery for its sizes, the shaped battery for
    its shapes, or both (1-D first, the shaped rows added to the same document and file).

    Raises what :func:`fftgauge.harness.battery.run.run_battery` and :func:`run_shaped_battery` raise.
    """
    from fftgauge.harness.battery.run import run_battery

    if not req.shape_cases:
        return run_battery(req, json_path=json_path, quiet=quiet)
    doc = None
    line_req = line_request(req)
    if line_req is not None:
        doc = run_battery(line_req, json_path=None if json_path == "-" else json_path, quiet=quiet)
    return run_shaped_battery(req, json_path=json_path, quiet=quiet, doc=doc)


def shaped_rows_from(rows: list[CheckRow]) -> list[dict]:
    """Return check rows as dicts (the job's return value)."""
    return [row.as_dict() for row in rows]


def check_shaped_fields(backend: Any, fields: tuple, seed: int, check_names: list[str] | None) -> list[dict]:
    """Return the rows (dicts) of the checks of the shaped case ``fields`` (what the worker job runs).

    Raises
    ------
    UsageError
        For an unknown check name.
    ValueError
        For fields no shaped case can be built from.
    """
    from fftgauge.harness.shapes.checks import check_shaped_case
    from fftgauge.harness.shapes.fields import case_from_fields

    case = case_from_fields(tuple(fields))
    if not isinstance(case, ShapeCase):
        raise UsageError(f"not a shaped case: {fields!r}")
    return shaped_rows_from(check_shaped_case(backend, case, seed, check_names))
