"""The correctness battery on a Dask cluster: ``fftgauge check --cluster ...``.

The same cases, checks, rows and results file as :func:`fftgauge.harness.battery.run.run_battery`;
only where the cases run changes. Each backend describes itself on a Dask worker (its claims
and the time budget's probes measured where the cases run), then its claimed cases go out
in chunks (one task: one backend, consecutive sizes largest first, every kind and precision
of each; :mod:`.chunks` sizes them), each run by :func:`~.tasks.run_chunk` in the
isolated worker processes of a local run. Rows stream back as tasks finish and go to the
same :class:`~fftgauge.harness.battery.run.RowSink`, so the file grows as locally; an
interruption keeps what finished. Every row carries ``host``: the host that ran it.
"""

from __future__ import annotations

import uuid
from dataclasses import dataclass
from typing import Any

from fftgauge.harness.cases import Case
from fftgauge.harness.cluster.chunks import SpecQueue, chunk_cases, size_groups
from fftgauge.harness.cluster.collect import TaskLoop, Tally
from fftgauge.harness.cluster.session import ClusterLost, ClusterSession, call_with_timeout
from fftgauge.harness.cluster.target import ClusterTarget
from fftgauge.harness.errors import RunStopped, UsageError

#: Seconds the backends' descriptions (claims and budget probes) may take on the cluster.
DESCRIBE_TIMEOUT_SECONDS = 600.0
#: Tasks kept in flight per Dask thread.
TASKS_PER_THREAD = 2


@dataclass
class ChunkMeta:
    """What the client remembers of a task in flight: its backend and case indices."""

    spec: str
    indices: list[int]


def describe_on_cluster(session: ClusterSession, req: Any, cases: list[Case]) -> dict[str, Any]:
    """Return SPEC -> claims, each backend described by a task (:func:`~.tasks.describe_spec`).

    Raises
    ------
    UsageError
        When a backend cannot be loaded or fails to describe itself (the first in the order asked).
    ClusterLost
        When the descriptions took longer than :data:`DESCRIBE_TIMEOUT_SECONDS`.
    """
    from fftgauge.harness.cluster.tasks import describe_spec

    fields = [(c.kind, c.dtype, c.n, c.norm) for c in cases]
    futures = {spec: session.client.submit(describe_spec, spec, req, fields, pure=False) for spec in req.specs}

    def gather() -> dict[str, Any]:
        return {spec: futures[spec].result() for spec in req.specs}

    try:
        return call_with_timeout(gather, DESCRIBE_TIMEOUT_SECONDS, "the backends' descriptions")
    except (UsageError, ClusterLost):
        raise
    except Exception as exc:  # noqa: BLE001 - a lost worker or a failing task: the user's cluster
        raise UsageError(f"a backend could not describe itself on the cluster: {type(exc).__name__}: {exc}") from None


class BatteryFeed:
    """Makes the battery's tasks: per backend (in the order asked), its chunks (:mod:`.chunks`)."""

    def __init__(self, session: ClusterSession, req: Any, claims: dict[str, Any], cases: list[Any],
                 check_names: list[str], stop_name: str, threads: int):
        self.session, self.req, self.claims, self.cases = session, req, claims, cases
        self.check_names, self.stop_name, self.threads = check_names, stop_name, threads
        self.queues = [SpecQueue(spec, self.groups([i for i, r in enumerate(claims[spec].reasons) if r is None]))
                       for spec in req.specs]
        #: Cases claimed in all (the progress bar's total).
        self.total_cases = sum(q.left for q in self.queues)
        #: (cases, seconds on the worker, seconds from submit to result) of every finished task.
        self.chunks: list[tuple[int, float]] = []

    def groups(self, indices: list[int]) -> Any:
        """Return the claimed case indices in run order, grouped: one size each, largest first."""
        return size_groups(indices, [c.n for c in self.cases])

    def remaining_cases(self) -> int:
        """Return the cases not yet sent."""
        return sum(q.left for q in self.queues)

    def expected_tasks(self, sent: int) -> int:
        """Return an estimate of the run's task count: sent, plus what is left at the current chunk size."""
        left = 0
        for q in self.queues:
            if q.left:
                size = chunk_cases(self.session.overhead_seconds, q.case_seconds or 0, q.left, self.threads) \
                    if q.case_seconds else 1
                left += -(-q.left // max(1, size))
        return sent + left

    def next(self) -> tuple[Any, ChunkMeta] | None:
        """Return ``(future, meta)`` of the next chunk, or None when every case was sent."""
        queue = next((q for q in self.queues if q.left), None)
        if queue is None:
            return None
        size = None
        if queue.case_seconds is not None:
            size = chunk_cases(self.session.overhead_seconds, queue.case_seconds, self.remaining_cases(), self.threads)
        indices = queue.take(size)
        return self.submit(queue.spec, indices), ChunkMeta(queue.spec, indices)

    def submit(self, spec: str, indices: list[int]) -> Any:
        """Return the future of the task that runs the cases ``indices`` of backend ``spec``."""
        from fftgauge.harness.cluster.tasks import run_chunk

        claims = self.claims[spec]
        fields = [(self.cases[i].kind, self.cases[i].dtype, self.cases[i].n, self.cases[i].norm) for i in indices]
        return self.session.client.submit(run_chunk, spec, claims.label, getattr(claims.capabilities, "conventions", None),
                                          fields, self.req, self.check_names, self.stop_name, pure=False)

    def error_rows(self, meta: ChunkMeta, text: str, host: str | None) -> list[dict]:
        """Return the ``error`` rows of a chunk that failed on the cluster, naming the host."""
        from fftgauge.harness.rows import error_rows

        label = self.claims[meta.spec].label
        return [{**row.as_dict(), "host": host or "unknown"}
                for i in meta.indices for row in error_rows(label, self.cases[i], self.check_names, text)]

    def learn(self, meta: ChunkMeta, result: dict[str, Any]) -> None:
        """Record a finished chunk's cost in its backend's estimate."""
        queue = next(q for q in self.queues if q.spec == meta.spec)
        queue.learn(result["cases"], result["seconds"])
        self.chunks.append((result["cases"], result["seconds"]))


def run_battery_on_cluster(req: Any, target: ClusterTarget, json_path: str | None = None,
                           quiet: bool = True) -> dict[str, Any]:
    """Run the battery (1-D sizes and/or ``--shapes``, :mod:`.shaped`) on the cluster ``target``;
    return the ``fftgauge-check/1`` document (rows with ``host``; the envelope's ``cluster``
    says where and the chunking).

    Raises
    ------
    UsageError
        For an unreachable scheduler, workers lacking fftgauge or a backend, a SPEC that
        cannot be loaded, an unknown check, or a scheduler lost mid-run (the rows that
        finished are written first, ``complete: false``).
    RunStopped
        When a signal stopped the run (its ``doc`` holds what finished).
    ResultsWriteError
        When the results file could not be written.
    """
    from fftgauge.harness.battery.checks import CHECKS
    from fftgauge.harness.cluster.session import cluster_session

    from fftgauge.harness.cluster.shaped import check_request_in_session

    if req.checks and not getattr(req, "shape_cases", ()):
        unknown = [c for c in req.checks if c not in CHECKS]
        if unknown:
            raise UsageError(f"unknown check {unknown[0]!r}; checks: {', '.join(CHECKS)}")
    with cluster_session(target, list(req.specs), req.threads, quiet=quiet) as session:
        return check_request_in_session(session, req, json_path, quiet)


def battery_in_session(session: ClusterSession, req: Any, json_path: str | None, quiet: bool) -> dict[str, Any]:
    """:func:`run_battery_on_cluster`'s body, on an open session."""
    from fftgauge.backends.registry import require_unique_labels
    from fftgauge.harness.battery.checks import CHECKS
    from fftgauge.harness.battery.run import battery_envelope, build_cases, finish_battery_rows, unclaimed_case_rows
    from fftgauge.harness.results import ResultsWriter

    check_names = list(req.checks) if req.checks else list(CHECKS)
    kinds = req.kinds or ("fft", "ifft", "rfft", "irfft")
    cases = build_cases(req, kinds)
    claims = describe_on_cluster(session, req, cases)
    require_unique_labels({spec: claims[spec].label for spec in req.specs})
    doc = battery_envelope(req, claims, kinds, list(req.checks) if req.checks else None)
    feed = BatteryFeed(session, req, claims, cases, check_names, f"fftgauge-stop-{uuid.uuid4().hex}",
                       cluster_threads(session))
    doc["cluster"] = session.record()
    writer = ResultsWriter(json_path, doc)
    writer.add(unclaimed_case_rows(req, claims, cases))
    return drive_feed(session, feed, writer, doc, json_path, quiet, "checking on the cluster",
                      lambda: finish_battery_rows(doc, req, claims), "chunks")


def cluster_threads(session: ClusterSession) -> int:
    """Return the Dask threads of the cluster (at least 1)."""
    return max(1, sum(call_with_timeout(session.client.nthreads, 10.0, "the workers' thread counts").values()))


def drive_feed(session: ClusterSession, feed: BatteryFeed, writer: Any, doc: dict[str, Any], json_path: str | None,
               quiet: bool, desc: str, finish: Any, record_key: str) -> dict[str, Any]:
    """Run ``feed``'s chunks, rows to ``writer`` as they come (a failed chunk: ``error`` rows
    naming the host), a progress bar ``desc``; at the end ``finish()`` puts the rows in their
    final form, ``doc["cluster"][record_key]`` records the chunking and the writer is closed.
    Return ``doc``.

    Raises
    ------
    RunStopped
        When a signal stopped the run (what finished is written, ``complete: false``).
    UsageError
        When the scheduler was lost mid-run (what finished is written first).
    """
    from fftgauge.harness.battery.run import RowSink
    from fftgauge.harness.execution.dispatch import Progress
    from fftgauge.harness.shutdown import stop_reason

    progress = Progress(total=feed.total_cases, quiet=quiet, desc=desc)
    sink, tally = RowSink(writer), Tally()

    def on_result(meta: ChunkMeta, result: dict[str, Any]) -> None:
        feed.learn(meta, result)
        sink.add(result["rows"])
        tally.done, tally.rows = tally.done + 1, tally.rows + len(result["rows"])
        progress.advance(result["cases"], note=tally.note(feed.expected_tasks(tally.sent)))

    def on_failure(meta: ChunkMeta, text: str, host: str | None) -> None:
        rows = feed.error_rows(meta, text, host)
        sink.add(rows)
        tally.done, tally.rows, tally.failures = tally.done + 1, tally.rows + len(rows), tally.failures + 1
        progress.advance(len(meta.indices), note=tally.note(feed.expected_tasks(tally.sent)))

    def make_next() -> Any:
        made = feed.next()
        if made is not None:
            tally.sent += 1
        return made

    loop = TaskLoop(session, make_next, on_result, on_failure, capacity=TASKS_PER_THREAD * feed.threads)
    stop: BaseException | None = None
    lost: ClusterLost | None = None
    try:
        loop.run()
    except KeyboardInterrupt as exc:
        stop = exc
        signal_stop(session, feed.stop_name)
    except ClusterLost as exc:
        lost = exc
    finally:
        progress.close()
        try:
            sink.close()
        finally:
            finish()
            doc.setdefault("cluster", session.record())
            doc["cluster"]["tasks"] = doc["cluster"].get("tasks", 0) + tally.done
            doc["cluster"][record_key] = chunk_summary(feed.chunks, session.overhead_seconds)
            writer.close(complete=stop is None and lost is None)
    if stop is not None:
        name, code = stop_reason(stop)
        raise RunStopped(name, code, doc) from stop
    if lost is not None:
        where = "standard output" if json_path == "-" else json_path
        raise UsageError(f"{lost}: {len(doc['rows'])} rows that finished were written to {where} "
                         f"(\"complete\": false); rerun when the scheduler is back")
    return doc


def signal_stop(session: ClusterSession, stop_name: str) -> None:
    """Set the run's stop flag, so chunks still running on the workers end after their case."""
    try:
        from distributed import Event

        call_with_timeout(lambda: Event(stop_name, client=session.client).set(), 5.0, "the stop flag")
    except Exception:  # noqa: BLE001 - a scheduler that is gone runs nothing anyway
        pass


def chunk_summary(chunks: list[tuple[int, float]], overhead_seconds: float) -> dict[str, Any]:
    """Return the envelope's record of the chunking: tasks, cases per task (smallest, median,
    largest), seconds of work per task (median) and the overhead's share of it."""
    import statistics

    if not chunks:
        return {"tasks": 0}
    cases = sorted(c for c, _ in chunks)
    seconds = sorted(s for _, s in chunks)
    work = statistics.median(seconds)
    return {"tasks": len(chunks), "cases_per_task_min": cases[0], "cases_per_task_median": statistics.median(cases),
            "cases_per_task_max": cases[-1], "work_seconds_per_task_median": work,
            "work_seconds_total": sum(seconds),
            "overhead_share": overhead_seconds / (overhead_seconds + work) if work > 0 else None}
