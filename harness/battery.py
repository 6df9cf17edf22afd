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
import threading
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from typing import Any, Iterable, Sequence

from harness.cases import Case
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


def backend_claims(backend: Any, case_fields: list[tuple], max_n_pure_python: int | None) -> dict[str, Any]:
    """Worker job: return the backend's description and, per case, why it is skipped (or None).

    ``max_n_pure_python`` caps the sizes given to backends that declare ``max_n`` (the
    pure-Python references), so a default run stays quick.
    """
    caps = backend.capabilities()
    reasons = []
    for fields in case_fields:
        case = Case(*fields)
        reason = backend.unsupported_reason(case)
        if reason is None and max_n_pure_python and caps.max_n is not None and case.n > max_n_pure_python:
            reason = (f"{backend.label} is a pure-Python reference: this run limits it to n <= "
                      f"{max_n_pure_python} (n = {case.n}); ask for it by its sizes to go further")
        reasons.append(reason)
    return {"label": backend.label, "describe": backend.describe(), "reasons": reasons}


def build_cases(req: BatteryRequest, kinds: Sequence[str]) -> list[Case]:
    """Return the cases of ``req`` for the given kinds, in a stable order (kind, dtype, norm, n)."""
    return [Case(k, d, n, norm) for k in kinds for d in req.dtypes for norm in req.norms for n in req.sizes]


def _rows_for(label: str, case: Case, check_names: Iterable[str], status: str, message: str) -> list[dict]:
    return [CheckRow(backend=label, kind=case.kind, dtype=case.dtype, n=case.n, norm=case.norm, check=name,
                     status=status, message=message).as_dict() for name in check_names]


@dataclass
class _Progress:
    """Thread-safe progress counter that drives a tqdm bar (or nothing when quiet)."""

    total: int
    quiet: bool
    _bar: Any = field(default=None, init=False)
    _lock: threading.Lock = field(default_factory=threading.Lock, init=False)

    def __post_init__(self) -> None:
        if not self.quiet:
            from tqdm import tqdm
            self._bar = tqdm(total=self.total, unit="case", desc="checking", leave=False, dynamic_ncols=True)

    def advance(self, k: int = 1, note: str | None = None) -> None:
        if self._bar is not None:
            with self._lock:
                self._bar.update(k)
                if note:
                    self._bar.set_postfix_str(note, refresh=False)

    def close(self) -> None:
        if self._bar is not None:
            self._bar.close()


def _describe(worker: Any, spec: str, req: BatteryRequest, cases: list[Case]) -> dict[str, Any]:
    """Ask a backend's worker which cases it claims.

    Raises
    ------
    UsageError
        When the SPEC cannot be loaded, or the backend fails while describing itself.
    """
    fields = [(c.kind, c.dtype, c.n, c.norm) for c in cases]
    try:
        return worker.call("harness.battery:backend_claims", fields, req.max_n_pure_python,
                           timeout_seconds=req.timeout_seconds)
    except BackendFailure as exc:
        raise UsageError(f"backend {spec!r} failed while describing itself: {exc}") from None


def _run_backend(worker: Any, claims: dict[str, Any], cases: list[Case], req: BatteryRequest,
                 check_names: list[str] | None, writer: ResultsWriter, progress: _Progress) -> None:
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
        claims = {spec: _describe(workers[spec], spec, req, cases) for spec in req.specs}
        doc = envelope(CHECK_SCHEMA, req.seed, extra={
            "reference": reference_method(),
            "backends": {claims[s]["label"]: {"spec": s, **claims[s]["describe"]} for s in req.specs},
            "request": {"kinds": list(kinds), "dtypes": list(req.dtypes), "norms": list(req.norms),
                        "sizes": list(req.sizes), "checks": check_names or list(CHECKS)},
        })
        writer = ResultsWriter(json_path, doc)
        progress = _Progress(total=len(cases) * len(req.specs), quiet=quiet)
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
