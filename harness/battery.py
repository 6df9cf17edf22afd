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

#: The ``check`` name of the single row that stands for a case the backend does not claim.
SKIPPED_CASE_CHECK = "all"

#: A backend claiming more cases than this is split into one shard per core.
SHARD_MIN_CASES = 100

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


@dataclass(frozen=True)
class _Shard:
    """A share of one backend's claimed cases, run by one worker process."""

    spec: str
    label: str
    capabilities: dict[str, Any]
    indices: tuple[int, ...]


def _shards(req: BatteryRequest, claims: dict[str, dict[str, Any]], parallel: int) -> list[_Shard]:
    """Split each backend's claimed cases into shards, longest first (for a balanced pool).

    A backend with more than :data:`SHARD_MIN_CASES` claimed cases is split into ``parallel``
    shards of interleaved cases (so each gets its share of the large sizes); the others stay
    whole. Sorting the shards longest first keeps one slow backend from running alone at the end.
    """
    out = []
    for spec in req.specs:
        claimed = [i for i, reason in enumerate(claims[spec]["reasons"]) if reason is None]
        k = parallel if len(claimed) > SHARD_MIN_CASES else 1
        for j in range(k):
            if claimed[j::k]:
                out.append(_Shard(spec, claims[spec]["label"], claims[spec]["describe"]["capabilities"],
                                  tuple(claimed[j::k])))
    return sorted(out, key=lambda sh: -len(sh.indices))


def _run_shard(shard: _Shard, worker: Any, cases: list[Case], req: BatteryRequest,
               check_names: list[str] | None, writer: ResultsWriter, progress: Progress) -> None:
    """Run the cases of one shard in its worker, writing rows as they come; closes the worker."""
    from harness.checks import CHECKS, applicable_checks

    try:
        for index in shard.indices:
            case = cases[index]
            names = [c for c in (check_names or list(CHECKS)) if c in applicable_checks(case, shard.capabilities)]
            try:
                rows = worker.call("harness.checks:run_case_checks", (case.kind, case.dtype, case.n, case.norm),
                                   req.seed, names, timeout_seconds=req.timeout_seconds)
            except BackendFailure as exc:
                rows = _rows_for(shard.label, case, names, "error", str(exc))
            writer.add(rows)
            progress.advance(note=f"{shard.label} {case.label()}")
    finally:
        worker.close()


def _skip_rows(req: BatteryRequest, claims: dict[str, dict[str, Any]], cases: list[Case]) -> list[dict]:
    """Return one ``skip`` row per case a backend does not claim (the reason as its message)."""
    return [row for spec in req.specs for case, reason in zip(cases, claims[spec]["reasons"]) if reason is not None
            for row in _rows_for(claims[spec]["label"], case, [SKIPPED_CASE_CHECK], "skip", reason)]


def _sort_rows(rows: list[dict], req: BatteryRequest, claims: dict[str, dict[str, Any]], order: list[str]) -> None:
    """Sort rows in place: backend (as asked), kind, dtype, norm, n, check (battery order)."""
    backend_pos = {claims[spec]["label"]: i for i, spec in enumerate(req.specs)}
    check_pos = {name: i for i, name in enumerate([SKIPPED_CASE_CHECK] + order)}
    kinds = ("fft", "ifft", "rfft", "irfft")
    rows.sort(key=lambda r: (backend_pos.get(r["backend"], 0), kinds.index(r["kind"]), r["dtype"], r["norm"],
                             r["n"], check_pos.get(r["check"], len(check_pos))))


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
            "reference": {dtype: reference_method(dtype) for dtype in req.dtypes},
            "backends": {claims[s]["label"]: {"spec": s, **claims[s]["describe"]} for s in req.specs},
            "request": {"kinds": list(kinds), "dtypes": list(req.dtypes), "norms": list(req.norms),
                        "sizes": list(req.sizes), "checks": check_names or list(CHECKS)},
        })
        writer = ResultsWriter(json_path, doc)
        writer.add(_skip_rows(req, claims, cases))
        parallel = max(1, os.cpu_count() or 1)
        shards = _shards(req, claims, parallel)
        progress = Progress(total=sum(len(sh.indices) for sh in shards), quiet=quiet)
        try:
            with ThreadPoolExecutor(max_workers=min(parallel, max(1, len(shards)))) as pool:
                futures = []
                for shard in shards:
                    # the describing worker runs the backend's first shard; other shards get their own
                    worker = workers.pop(shard.spec, None) or Worker(shard.spec, threads=req.threads)
                    futures.append(pool.submit(_run_shard, shard, worker, cases, req, check_names, writer, progress))
                for fut in futures:
                    fut.result()
        finally:
            progress.close()
            _sort_rows(doc["rows"], req, claims, list(CHECKS))
            writer.close()
    finally:
        for worker in workers.values():
            worker.close()
    return doc
