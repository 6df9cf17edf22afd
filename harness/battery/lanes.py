"""How a battery's work is spread over the cores: worker processes described in parallel, a
queue of batches, one lane per core driving one worker at a time, and a thread that hands the
rows to the results writer.

The 1-D battery (:mod:`fftgauge.harness.battery.run`) and the shaped battery
(:mod:`fftgauge.harness.shapes.battery`) both run on this machinery: each builds its
:class:`WorkQueue` of :class:`Batch` es (every claimed case of one backend and one size or
shape) and a function that runs one case in a worker, and :func:`run_lanes` does the rest
(see :mod:`fftgauge.harness.battery.run` for why the lanes take work as they do).
"""

from __future__ import annotations

import os
import queue
import threading
import time
from collections import deque
from concurrent.futures import ThreadPoolExecutor
from contextlib import contextmanager
from dataclasses import dataclass
from typing import Any, Callable, Iterator

from fftgauge.harness.battery.request import BatteryRequest
from fftgauge.harness.errors import RunStopped
from fftgauge.harness.results import ResultsWriter

@dataclass(frozen=True)
class Batch:
    """Every claimed case of one backend and one size (or shape), run one after another by one worker."""

    spec: str
    label: str
    capabilities: Any
    indices: tuple[int, ...]


class WorkQueue:
    """A battery's work: per backend (in the order asked), its batches in the order given;
    lanes take them with :meth:`next`. Thread-safe.

    ``join_min`` is how many batches a backend must have left for a lane that finished its
    own backend to join it (with a worker of its own).
    """

    def __init__(self, specs: list[str], left: dict[str, deque[Batch]], join_min: int = 1):
        self._order = list(specs)
        self._left = left
        self._join_min = join_min
        #: How many cases the queue held at the start.
        self.total_cases = sum(len(b.indices) for q in self._left.values() for b in q)
        #: How many batches the queue held at the start.
        self.total_batches = sum(len(q) for q in self._left.values())
        self._started: set[str] = set()
        self._lock = threading.Lock()
        #: True once :meth:`stop` was called: no batch is handed out any more.
        self.stopped = False

    def stop(self) -> None:
        """Hand out no more batches (the run is stopping)."""
        self.stopped = True

    def next(self, spec: str | None) -> Batch | None:
        """Return the next batch for a lane now working on backend ``spec`` (None: on none yet),
        or None when the lane should stop.

        In order of preference: the next batch of the lane's own backend (its worker is
        running); the first batch of the first backend no lane has started (in the order
        asked; its describing worker is waiting); a batch of the backend with the most batches
        left, when it has at least ``join_min``.
        """
        with self._lock:
            if self.stopped:
                return None
            if spec is not None and self._left.get(spec):
                return self._left[spec].popleft()
            for other in self._order:
                if other not in self._started and self._left[other]:
                    self._started.add(other)
                    return self._left[other].popleft()
            busiest = max(self._order, key=lambda s: len(self._left[s]), default=None)
            if busiest is not None and self._left[busiest] and len(self._left[busiest]) >= self._join_min:
                return self._left[busiest].popleft()
            return None


class Lane:
    """One core's share of the run: what a thread of the main process uses to drive one worker
    process at a time. ``spare_workers`` (SPEC -> describing worker) is shared by the lanes,
    under ``lock``; the first lane to reach a backend takes its describing worker."""

    def __init__(self, spare_workers: dict[str, Any], lock: threading.Lock, req: BatteryRequest, lanes: int = 1):
        self._spare, self._lock, self._req = spare_workers, lock, req
        #: How many lanes run at once (their workers share the default memory cap).
        self.lanes = lanes
        #: The SPEC of the backend the lane's worker runs (None before the first batch).
        self.spec: str | None = None
        self._worker: Any = None

    def worker_for(self, spec: str) -> Any:
        """Return a worker for ``spec``: the current one, else the spare (describing) one, else a new one."""
        from fftgauge.harness.execution.worker import Worker

        if spec != self.spec:
            self.close()
            with self._lock:
                self._worker = self._spare.pop(spec, None)
            self._worker = self._worker or Worker(spec, threads=self._req.threads, concurrency=self.lanes)
            self.spec = spec
        return self._worker

    def close(self) -> None:
        """Close the current worker (if any)."""
        if self._worker is not None:
            self._worker.close()
        self._worker, self.spec = None, None

    def abort(self) -> None:
        """Kill the current worker's child at once (from another thread: the run is stopping);
        the lane's waiting call then fails and the lane ends."""
        worker = self._worker
        if worker is not None:
            worker.abort()


class RowSink:
    """Passes rows to a :class:`~fftgauge.harness.results.ResultsWriter` from a thread of its own, so a
    lane hands its rows over and goes on at once, never waiting while the writer rewrites the
    file (a rewrite of tens of thousands of rows takes a good fraction of a second, during
    which every worker would otherwise sit idle).
    """

    def __init__(self, writer: ResultsWriter):
        self._writer = writer
        self._queue: "queue.SimpleQueue[list[dict] | None]" = queue.SimpleQueue()
        self._error: BaseException | None = None
        self._thread = threading.Thread(target=self._drain, name="fftgauge-rows", daemon=True)
        self._thread.start()

    def _drain(self) -> None:
        while (rows := self._queue.get()) is not None:
            if self._error is None:
                try:
                    self._writer.add(rows)
                except BaseException as exc:  # noqa: BLE001 - raised again by close()
                    self._error = exc

    def add(self, rows: list[dict]) -> None:
        """Queue ``rows`` for the writer."""
        self._queue.put(rows)

    def close(self) -> None:
        """Wait until every queued row is with the writer (the writer itself stays open).

        Raises
        ------
        BaseException
            Whatever the writer raised while taking rows (for example a
            :class:`~fftgauge.harness.errors.UsageError` for a results file that cannot be written).
        """
        self._queue.put(None)
        self._thread.join()
        if self._error is not None:
            raise self._error


#: Seconds between the main thread's looks at the lanes (how soon it sees a signal's exception).
JOIN_POLL_SECONDS = 0.1
#: Seconds the lanes get to end after their workers were killed, before the run stops without them.
STOP_WAIT_SECONDS = 1.0


def drive_lanes(lanes: list[Lane], batches: WorkQueue, workers: dict[str, Any],
                run_lane: Any) -> KeyboardInterrupt | None:
    """Run ``run_lane(lane)`` for every lane in a thread of its own until all are done; return
    None, or the interruption (KeyboardInterrupt, or the StopRequested of a SIGTERM/SIGHUP)
    that stopped them.

    On an interruption the queue stops handing out batches, every lane's worker and every
    spare worker is killed at once (their calls fail, and the lanes end without rows for the
    cases they were running), and the lanes get :data:`STOP_WAIT_SECONDS` to end: the threads
    are daemons, so none keeps the process alive.

    Raises
    ------
    BaseException
        The first exception a lane raised (after every lane has ended).
    """
    errors: list[BaseException] = []

    def lane_main(lane: Lane) -> None:
        try:
            run_lane(lane)
        except BaseException as exc:  # noqa: BLE001 - raised again in the main thread
            errors.append(exc)

    threads = [threading.Thread(target=lane_main, args=(lane,), name=f"fftgauge-lane-{i}", daemon=True)
               for i, lane in enumerate(lanes)]
    try:
        for thread in threads:
            thread.start()
        for thread in threads:
            while thread.is_alive():
                thread.join(JOIN_POLL_SECONDS)
    except KeyboardInterrupt as stop:
        batches.stop()
        for lane in lanes:
            lane.abort()
        for worker in list(workers.values()):
            worker.abort()
        deadline = time.monotonic() + STOP_WAIT_SECONDS
        for thread in threads:
            if thread.ident is not None:  # started (a signal may come while they start)
                thread.join(max(0.0, deadline - time.monotonic()))
        return stop
    if errors:
        raise errors[0]
    return None


def describe_in_parallel(specs: list[str], describe: Callable[[str], Any], parallel: int) -> dict[str, Any]:
    """Return ``{spec: describe(spec)}`` for every SPEC, asked ``parallel`` at a time (threads).

    Raises
    ------
    BaseException
        The first SPEC's exception (in the order asked); on any exception the pending
        descriptions are cancelled and not waited for (the caller kills the workers).
    """
    pool = ThreadPoolExecutor(max_workers=max(1, min(parallel, len(specs))))
    try:
        futures = {spec: pool.submit(describe, spec) for spec in specs}
        answers = {spec: futures[spec].result() for spec in specs}
    except BaseException:  # an interruption: the caller kills the workers, so do not wait here
        pool.shutdown(wait=False, cancel_futures=True)
        raise
    pool.shutdown(wait=True)
    return answers


@contextmanager
def battery_workers(specs: list[str], threads: int | None, parallel: int) -> Iterator[dict[str, Any]]:
    """Yield a describing :class:`~fftgauge.harness.execution.worker.Worker` per SPEC; on an
    interruption they are killed at once (not after their start-up), and every one is closed
    on leaving."""
    from fftgauge.harness.execution.worker import Worker

    workers = {spec: Worker(spec, threads=threads, concurrency=parallel) for spec in specs}
    try:
        yield workers
    except KeyboardInterrupt:
        for worker in workers.values():
            worker.abort()
        raise
    finally:
        for worker in workers.values():
            worker.close()


def lane_parallelism() -> int:
    """Return how many lanes a run has at most: one per core."""
    return max(1, os.cpu_count() or 1)


def work_lane(lane: Lane, batches: WorkQueue, run_one: Callable[[Any, Batch, int], "list[dict] | None"],
              sink: RowSink, progress: Any, note: Callable[[Batch, int], str]) -> None:
    """Take batches from ``batches`` until it has none for this lane; for every case index of
    a batch ``run_one(worker, batch, index)`` gives its rows (None: the run is stopping, the
    lane ends), passed to ``sink``, and the progress advances with ``note(batch, index)``.
    Closes the lane's worker."""
    try:
        while (batch := batches.next(lane.spec)) is not None:
            worker = lane.worker_for(batch.spec)
            for index in batch.indices:
                if batches.stopped:
                    return
                rows = run_one(worker, batch, index)
                if rows is None:
                    return
                sink.add(rows)
                progress.advance(note=note(batch, index))
    finally:
        lane.close()


def run_lanes(workers: dict[str, Any], batches: WorkQueue, req: BatteryRequest, writer: ResultsWriter,
              progress: Any, run_one: Callable[[Any, Batch, int], "list[dict] | None"],
              note: Callable[[Batch, int], str], finish: Callable[[], None]) -> KeyboardInterrupt | None:
    """Run every batch of ``batches`` on one lane per core (at most one per batch), rows to
    ``writer`` through a :class:`RowSink` (see :func:`work_lane`); return None, or the
    interruption that stopped the run (:func:`drive_lanes`).

    Whatever happens, the progress is closed, every row is handed to the writer, ``finish()``
    puts the rows in their final form and the writer is closed (``complete`` unless stopped).

    Raises
    ------
    BaseException
        What a lane, the sink or the writer raised.
    """
    lock = threading.Lock()
    count = min(lane_parallelism(), max(1, batches.total_batches))
    lanes = [Lane(workers, lock, req, count) for _ in range(count)]
    sink = RowSink(writer)
    stop: KeyboardInterrupt | None = None
    try:
        stop = drive_lanes(lanes, batches, workers, lambda lane: work_lane(lane, batches, run_one, sink, progress, note))
    finally:
        progress.close()
        try:
            sink.close()
        finally:
            finish()
            writer.close(complete=stop is None)
    return stop


def raise_if_stopped(stop: KeyboardInterrupt | None, doc: dict[str, Any]) -> None:
    """Raise :class:`~fftgauge.harness.errors.RunStopped` (holding ``doc``) when ``stop`` is an interruption."""
    from fftgauge.harness.shutdown import stop_reason

    if stop is not None:
        name, code = stop_reason(stop)
        raise RunStopped(name, code, doc) from stop
