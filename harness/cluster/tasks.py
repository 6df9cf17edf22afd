"""What runs on the Dask workers: the start-up probe, the battery's chunks (1-D and shaped), the
timer's chunks, ``count``'s chunks, and the release of the worker processes they keep.

A Dask worker never loads a backend itself: every chunk runs the backend in the same isolated
:class:`~fftgauge.harness.execution.worker.Worker` processes as a local run, so a backend that
crashes, hangs or hogs memory becomes ``error`` rows and the Dask worker carries on. The
worker processes are kept between chunks (one per backend and task running at once, as a
local lane keeps its worker; the start-up probe's process is the first one kept), so a chunk
pays no start-up; :func:`release_workers` (run on every Dask worker at the end) closes them.
They start in the environment of a local run: the variables a Dask nanny forces on its
worker (:func:`clean_environ`) are taken out first. Ground truth is computed inside those
processes, where the checks use it; only rows travel back.
"""

from __future__ import annotations

import contextlib
import dataclasses
import os
import threading
import time
from typing import Any, Iterator
from urllib.parse import urlsplit

from fftgauge import __version__
from fftgauge.harness.cases import Case
from fftgauge.harness.errors import BackendFailure, UsageError

#: Seconds a probe gives one backend to load in a fresh worker process.
PROBE_LOAD_SECONDS = 60.0
#: Seconds between two looks of a running chunk at the run's stop flag.
STOP_LOOK_SECONDS = 0.5
#: Seconds a timing chunk waits for its host's timing slot before giving up (error rows).
TIMING_SLOT_WAIT_SECONDS = 3600.0

_CACHE_LOCK = threading.Lock()
#: (SPEC, threads) -> [(lock, Worker), ...]: the worker processes kept between chunks (a
#: chunk takes one whose lock is free; one per task this Dask worker runs at once).
_KEPT: dict[tuple, list[tuple[threading.Lock, Any]]] = {}
#: The variables a Dask nanny sets in its worker's environment whatever was there
#: (``distributed.nanny.pre-spawn-environ``, and the hash seed it adds), which the worker
#: processes would otherwise inherit. ``MALLOC_TRIM_THRESHOLD_`` set at all switches off
#: glibc's dynamic mmap threshold (mallopt(3)), so every array over 128 KiB is mapped and
#: unmapped afresh: measured on ``check --sizes 60000..60020`` (numpy, fft float64) as 14 s
#: of system time against 1.8 s without it, and 1.5 to 1.9 times the wall time.
NANNY_HASH_SEED = ("PYTHONHASHSEED", "6640")
_ENVIRON_CLEANED: list[bool] = []


def this_host() -> str:
    """Return the host part of this Dask worker's address (``127.0.0.1``, ``10.0.0.5``), or
    ``local`` outside a Dask worker."""
    try:
        from distributed import get_worker

        return urlsplit(get_worker().address).hostname or "local"
    except (ImportError, ValueError):
        return "local"


def host_of(address: str | None) -> str:
    """Return the host part of a Dask address (``tcp://10.0.0.5:40331`` -> ``10.0.0.5``)."""
    if not address:
        return "unknown"
    return urlsplit(address if "://" in address else f"tcp://{address}").hostname or str(address)


def probe_worker(specs: list[str], threads: int | None, dask_worker: Any = None) -> dict[str, Any]:
    """Return what this Dask worker offers: ``host``, ``fftgauge`` (version), ``machine`` (its
    fingerprint) and ``missing`` (SPEC -> why the backend does not load here), each backend
    loaded in an isolated worker process (a library that crashes on import cannot take the
    Dask worker down), kept for the run's first chunk when it loaded. Run by ``Client.run``
    on every worker (``dask_worker`` is passed by Dask)."""
    from fftgauge.harness.execution import jobs
    from fftgauge.harness.machine import machine_fingerprint

    missing: dict[str, str] = {}
    for spec in specs:
        with kept_worker(spec, threads, start_timeout_seconds=PROBE_LOAD_SECONDS) as worker:
            try:
                worker.call(jobs.describe_backend, timeout_seconds=PROBE_LOAD_SECONDS)
            except (UsageError, BackendFailure) as exc:
                missing[spec] = str(exc)
                drop_kept_worker(worker)
    address = getattr(dask_worker, "address", None)
    return {"host": host_of(address) if address else this_host(), "fftgauge": __version__,
            "machine": machine_fingerprint(), "missing": missing}


def nanny_environ() -> dict[str, str]:
    """Return the variables a Dask nanny puts into its worker's environment (name -> value)."""
    try:
        import dask

        import distributed  # noqa: F401 - its import loads the ``distributed`` settings

        set_by_nanny = dask.config.get("distributed.nanny.pre-spawn-environ", default={}) or {}
    except ImportError:
        set_by_nanny = {}
    return {**{str(k): str(v) for k, v in set_by_nanny.items()}, NANNY_HASH_SEED[0]: NANNY_HASH_SEED[1]}


def clean_environ(environ: Any = None) -> list[str]:
    """Remove from ``environ`` (this process's ``os.environ`` by default) the variables that
    hold exactly the value a Dask nanny sets (:func:`nanny_environ`), so that the worker
    processes started from here run in the environment of a local run; return the names
    removed. The Dask worker itself read them at its start and keeps what they did."""
    environ = os.environ if environ is None else environ
    removed = [name for name, value in nanny_environ().items() if environ.get(name) == value]
    for name in removed:
        environ.pop(name, None)
    return removed


@contextlib.contextmanager
def kept_worker(spec: str, threads: int | None, start_timeout_seconds: float | None = None) -> Iterator[Any]:
    """Yield a Worker kept for ``spec`` that no other task is using (a new one when all are
    busy), reserved for the block; it stays kept afterwards, for the next chunk.
    ``start_timeout_seconds``: the start-up wait of a new one (None: the Worker's default)."""
    from fftgauge.harness.execution.worker import Worker

    key = (spec, threads)
    with _CACHE_LOCK:
        if not _ENVIRON_CLEANED:
            clean_environ()
            _ENVIRON_CLEANED.append(True)
        kept = _KEPT.setdefault(key, [])
        pair = next((p for p in kept if p[0].acquire(blocking=False)), None)
        if pair is None:
            extra = {} if start_timeout_seconds is None else {"start_timeout_seconds": start_timeout_seconds}
            pair = (threading.Lock(), Worker(spec, threads=threads, concurrency=os.cpu_count() or 1, **extra))
            pair[0].acquire()
            kept.append(pair)
    try:
        yield pair[1]
    finally:
        pair[0].release()


def drop_kept_worker(worker: Any) -> None:
    """Close ``worker`` and forget it (a backend that did not load: no chunk should reuse it)."""
    with _CACHE_LOCK:
        for pairs in _KEPT.values():
            pairs[:] = [p for p in pairs if p[1] is not worker]
    worker.close()


def release_workers(dask_worker: Any = None) -> int:
    """Close every worker process this Dask worker keeps (killing one still in use after a
    moment); return how many were closed. Run by ``Client.run`` at the end of a run."""
    with _CACHE_LOCK:
        kept = [pair for pairs in _KEPT.values() for pair in pairs]
        _KEPT.clear()
    for lock, worker in kept:
        if lock.acquire(timeout=STOP_LOOK_SECONDS):
            try:
                worker.close()
            finally:
                lock.release()
        else:
            worker.abort()
    return len(kept)


def noop(payload: Any = None) -> float:
    """Return the worker's clock (the task that measures the per-task overhead)."""
    return time.perf_counter()


class StopFlag:
    """The run's stop flag (a Dask ``Event`` named ``name``), looked at most every
    :data:`STOP_LOOK_SECONDS`; None as the name: never set."""

    def __init__(self, name: str | None):
        self._event = None
        # the first look only after STOP_LOOK_SECONDS: a short chunk asks the scheduler nothing
        self._next_look = time.monotonic() + STOP_LOOK_SECONDS
        if name:
            from distributed import Event

            self._event = Event(name)

    def is_set(self) -> bool:
        """Return True once the client asked the run to stop."""
        if self._event is None or time.monotonic() < self._next_look:
            return False
        self._next_look = time.monotonic() + STOP_LOOK_SECONDS
        try:
            return bool(self._event.is_set())
        except Exception:  # noqa: BLE001 - the scheduler is gone: the chunk's rows are still worth returning
            return False


def describe_spec(spec: str, req: Any, case_fields: list[tuple], with_budget: bool = True) -> Any:
    """Return the backend's claims for the run's cases, with (``with_budget``: the battery)
    the cases over the time budget marked (measured here, where the cases will run): the local run's
    :func:`~fftgauge.harness.execution.dispatch.describe_cases` and
    :func:`~fftgauge.harness.battery.run.with_time_reasons`.

    Raises
    ------
    UsageError
        When the SPEC cannot be loaded or the backend fails while describing itself.
    """
    from fftgauge.harness.battery.run import with_time_reasons
    from fftgauge.harness.execution.dispatch import describe_cases

    cases = [Case(*fields) for fields in case_fields]
    with kept_worker(spec, req.threads) as worker:
        claims = describe_cases(worker, spec, cases, req.max_n_pure_python, req.timeout_seconds)
        return with_time_reasons(worker, claims, req, cases) if with_budget else claims


def run_chunk(spec: str, label: str, conventions: Any, case_fields: list[tuple], req: Any,
              check_names: list[str], stop_name: str | None = None) -> dict[str, Any]:
    """Run the battery's checks of ``case_fields`` on ``spec`` in this worker's isolated
    process, as a local lane does (a failure of the backend: ``error`` rows).

    Returns ``{"rows", "host", "cases", "seconds", "stopped"}``: the rows (each with ``host``),
    how many cases finished, the seconds the chunk took here, and whether it stopped early
    because the run was stopped.
    """
    from fftgauge.harness.battery.criteria import apply_limits
    from fftgauge.harness.battery.run import leftover_rows
    from fftgauge.harness.execution import jobs
    from fftgauge.harness.rows import error_rows

    started = time.perf_counter()
    host, stop = this_host(), StopFlag(stop_name)
    rows: list[dict] = []
    done = 0
    with kept_worker(spec, req.threads) as worker:
        for fields in case_fields:
            if stop.is_set():
                break
            case = Case(*fields)
            try:
                case_rows = worker.call(jobs.run_case_job, fields, req.seed, check_names, req.threads or 1,
                                        timeout_seconds=req.timeout_seconds)
            except BackendFailure as exc:
                case_rows = [row.as_dict() for row in error_rows(label, case, check_names, str(exc))]
            case_rows = apply_limits(case_rows, req.limits, conventions) + leftover_rows(label, case,
                                                                                          worker.left_running)
            rows.extend({**row, "host": host} for row in case_rows)
            done += 1
    return {"rows": rows, "host": host, "cases": done, "seconds": time.perf_counter() - started,
            "stopped": done < len(case_fields)}


def describe_shaped_spec(spec: str, req: Any, cases: list[Any]) -> Any:
    """Return the backend's claims for the shaped ``cases`` (the local shaped battery's
    :func:`~fftgauge.harness.execution.dispatch.describe_cases`), described here.

    Raises
    ------
    UsageError
        When the SPEC cannot be loaded or the backend fails while describing itself.
    """
    from fftgauge.harness.execution.dispatch import describe_cases

    with kept_worker(spec, req.threads) as worker:
        return describe_cases(worker, spec, list(cases), req.max_n_pure_python, req.timeout_seconds)


def run_shaped_chunk(spec: str, label: str, conventions: Any, cases: list[Any], req: Any, check_names: list[str],
                     stop_name: str | None = None) -> dict[str, Any]:
    """Run the shaped checks of ``cases`` (:class:`~fftgauge.harness.shapes.case.ShapeCase`) on
    ``spec`` in this worker's isolated process, as a local lane does
    (:func:`fftgauge.harness.shapes.battery.run_case`, then the limits). Returns what
    :func:`run_chunk` returns."""
    from fftgauge.harness.battery.criteria import apply_limits
    from fftgauge.harness.shapes.battery import run_case

    started = time.perf_counter()
    host, stop = this_host(), StopFlag(stop_name)
    rows: list[dict] = []
    done = 0
    with kept_worker(spec, req.threads) as worker:
        for case in cases:
            if stop.is_set():
                break
            case_rows = apply_limits(run_case(worker, label, case, req, check_names), req.limits, conventions)
            rows.extend({**row, "host": host} for row in case_rows)
            done += 1
    return {"rows": rows, "host": host, "cases": done, "seconds": time.perf_counter() - started,
            "stopped": done < len(cases)}


def time_chunk(req: Any, pin: str | None, slot_name: str | None) -> dict[str, Any]:
    """Time the cases of ``req`` here (the local :func:`~fftgauge.harness.timing.runner.run_timing`,
    pinned as ``--pin-cpu`` says on this host), holding the host's timing slot (a Dask
    ``Lock`` named ``slot_name``) so that no other timed case runs on this host meanwhile.

    Returns ``{"rows", "host", "machine", "seconds", "backends"}``: every row carries ``host``
    and ``machine`` (this host's fingerprint).

    Raises
    ------
    UsageError
        When a SPEC cannot be loaded here or the CPUs asked for do not exist here.
    BackendFailure
        When the host's timing slot was not free within :data:`TIMING_SLOT_WAIT_SECONDS`.
    """
    from fftgauge.harness.machine import machine_fingerprint
    from fftgauge.harness.timing.affinity import choose_cpus, parse_pin
    from fftgauge.harness.timing.runner import run_timing

    host, machine = this_host(), machine_fingerprint()
    local_req = dataclasses.replace(req, cpus=choose_cpus(parse_pin(pin), req.threads))
    slot = None
    if slot_name:
        from distributed import Lock

        slot = Lock(slot_name)
        if not slot.acquire(timeout=TIMING_SLOT_WAIT_SECONDS):
            raise BackendFailure(f"the timing slot of host {host} was not free within {TIMING_SLOT_WAIT_SECONDS:g} s")
    started = time.perf_counter()
    try:
        doc = run_timing(local_req, json_path=None, quiet=True)
    finally:
        if slot is not None:
            slot.release()
    rows = [{**row, "host": host, "machine": machine} for row in doc["rows"]]
    return {"rows": rows, "host": host, "machine": machine, "seconds": time.perf_counter() - started,
            "backends": doc.get("backends", {}), "pinned_cpus": doc.get("pinned_cpus")}


def count_chunk(sizes: list[int], count_trivial: bool) -> dict[str, Any]:
    """Return ``count``'s rows for ``sizes`` computed here
    (:func:`~fftgauge.harness.timing.opcount.count_table`), with the host and the seconds taken."""
    from fftgauge.harness.timing.opcount import count_table

    started = time.perf_counter()
    rows = count_table(sizes, count_trivial=count_trivial)
    return {"rows": rows, "host": this_host(), "seconds": time.perf_counter() - started}
