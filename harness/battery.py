"""The correctness battery's engine: cases x backends, run in worker processes, rows
streamed to a results file.

:func:`run_battery` is what ``fftgauge check`` and the Python API call. For each backend it
starts a :class:`~harness.worker.Worker`, asks it which cases the backend claims (the
others become ``skip`` rows with the reason), then runs every check of every claimed case
in the worker (:func:`harness.checks.run_case_checks`), one case per call with a timeout,
so a crash or a hang becomes ``error`` rows and the run goes on. Backends run in parallel,
one worker each, up to the number of cores.
"""

from __future__ import annotations

import os
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from typing import Any, Iterable, Sequence

from harness.cases import Case
from harness.dispatch import Progress, describe_cases
from harness.errors import BackendFailure, UsageError
from harness.results import ResultsWriter, envelope
from harness.rows import CheckRow

CHECK_SCHEMA = "fftgauge-check/1"

#: Seconds one case (all its checks) may take in a worker before it is killed.
DEFAULT_CASE_TIMEOUT_SECONDS = 120.0


@dataclass(frozen=True)
class BatteryRequest:
    """What to run: validated at the boundary (CLI or API), trusted here."""

    specs: tuple[str, ...]
    kinds: tuple[str, ...] | None
    dtypes: tuple[str, ...]
    sizes: tuple[int, ...]
    norms: tuple[str, ...] = ("backward",)
    checks: tuple[str, ...] | None = None
    seed: int = 1234
    threads: int | None = None
    timeout_seconds: float = DEFAULT_CASE_TIMEOUT_SECONDS
    max_n_pure_python: int | None = None


def build_cases(req: BatteryRequest, kinds: Sequence[str]) -> list[Case]:
    """Return the cases of ``req`` for the given kinds, in a stable order (kind, dtype, norm, n)."""
    return [Case(k, d, n, norm) for k in kinds for d in req.dtypes for norm in req.norms for n in req.sizes]


def _rows_for(label: str, case: Case, check_names: Iterable[str], status: str, message: str) -> list[dict]:
    return [CheckRow(backend=label, kind=case.kind, dtype=case.dtype, n=case.n, norm=case.norm, check=name,
                     status=status, message=message).as_dict() for name in check_names]


def _run_backend(worker: Any, claims: dict[str, Any], cases: list[Case], req: BatteryRequest,
                 check_names: list[str] | None, writer: ResultsWriter, progress: Progress) -> None:
    """Run every claimed case of one backend in its worker, writing rows as they come."""
    from harness.checks import CHECKS, applicable_checks

    label = claims["label"]
    caps = claims["describe"]["capabilities"]
    for case, reason in zip(cases, claims["reasons"]):
        names = check_names or list(CHECKS)
        if reason is not None:
            writer.add(_rows_for(label, case, names, "skip", reason))
            progress.advance()
            continue
        names = [c for c in names if c in applicable_checks(case, caps)]
        try:
            rows = worker.call("harness.checks:run_case_checks", (case.kind, case.dtype, case.n, case.norm),
                               req.seed, names, timeout_seconds=req.timeout_seconds)
        except BackendFailure as exc:
            rows = _rows_for(label, case, names, "error", str(exc))
        writer.add(rows)
        progress.advance(note=f"{label} {case.label()}")


def run_battery(req: BatteryRequest, json_path: str | None = None, quiet: bool = True) -> dict[str, Any]:
    """Run the battery and return the ``fftgauge-check/1`` document (rows included).

    Rows are streamed to ``json_path`` (when given) as cases finish, so an interrupted run
    keeps what it finished.

    Raises
    ------
    UsageError
        When a backend SPEC cannot be loaded or a check name is unknown.
    """
    from harness.checks import CHECKS
    from harness.reference import reference_method
    from harness.worker import Worker

    if req.checks:
        unknown = [c for c in req.checks if c not in CHECKS]
        if unknown:
            raise UsageError(f"unknown check {unknown[0]!r}; checks: {', '.join(CHECKS)}")
    check_names = list(req.checks) if req.checks else None
    kinds = req.kinds or ("fft", "ifft", "rfft", "irfft")
    cases = build_cases(req, kinds)
    workers = {spec: Worker(spec, threads=req.threads) for spec in req.specs}
    try:
        claims = {spec: describe_cases(workers[spec], spec, cases, req.max_n_pure_python, req.timeout_seconds) for spec in req.specs}
        doc = envelope(CHECK_SCHEMA, req.seed, extra={
            "reference": reference_method(),
            "backends": {claims[s]["label"]: {"spec": s, **claims[s]["describe"]} for s in req.specs},
            "request": {"kinds": list(kinds), "dtypes": list(req.dtypes), "norms": list(req.norms),
                        "sizes": list(req.sizes), "checks": check_names or list(CHECKS)},
        })
        writer = ResultsWriter(json_path, doc)
        progress = Progress(total=len(cases) * len(req.specs), quiet=quiet)
        try:
            parallel = max(1, min(len(req.specs), os.cpu_count() or 1))
            with ThreadPoolExecutor(max_workers=parallel) as pool:
                futures = [pool.submit(_run_backend, workers[spec], claims[spec], cases, req, check_names,
                                       writer, progress) for spec in req.specs]
                for fut in futures:
                    fut.result()
        finally:
            progress.close()
            writer.close()
    finally:
        for worker in workers.values():
            worker.close()
    return doc
