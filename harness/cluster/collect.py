"""The client's loop of a cluster run: keep the workers fed with tasks, hand each finished
task's result (or failure) on as it comes (``as_completed``), and watch the scheduler, so
that no wait is without a timeout.

A task whose Dask worker was lost is re-run by the scheduler on another worker (once, for
``local:N``; the scheduler's ``allowed-failures`` setting elsewhere); after that it fails
with ``KilledWorker``, and the run reports its cases as ``error`` rows naming the host.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field
from typing import Any, Callable

from fftgauge.harness.cluster.session import ClusterLost, ClusterSession, call_with_timeout
from fftgauge.harness.cluster.tasks import host_of

#: Seconds between two looks at the scheduler and the workers while no task finishes.
POLL_SECONDS = 0.05
#: Seconds the scheduler may be unreachable before the run gives up on it.
SCHEDULER_LOST_SECONDS = 15.0
#: Seconds a host may have no worker before its pinned tasks are reported lost.
HOST_LOST_SECONDS = 15.0
#: Seconds between two looks at which hosts still have workers.
HOSTS_LOOK_SECONDS = 1.0


@dataclass
class Tally:
    """What the progress line shows: tasks done and sent, rows, failures (tasks that failed)."""

    done: int = 0
    sent: int = 0
    rows: int = 0
    failures: int = 0
    task_seconds: list[float] = field(default_factory=list)

    def note(self, expected_tasks: int | None = None) -> str:
        """Return the progress note: ``tasks 3/10, 1234 rows, 0 failures``."""
        total = max(expected_tasks or 0, self.sent)
        return f"tasks {self.done}/{total}, {self.rows} rows, {self.failures} failures"


def failure_host(exc: BaseException) -> str | None:
    """Return the host a failed task last ran on, where the exception says (``KilledWorker``)."""
    worker = getattr(exc, "last_worker", None)
    if worker is None:
        return None
    return host_of(getattr(worker, "address", worker))


def failure_text(exc: BaseException, host: str | None) -> str:
    """Return the message of the ``error`` rows of a task that failed with ``exc``."""
    from distributed.scheduler import KilledWorker

    if isinstance(exc, KilledWorker):
        return (f"the Dask worker on host {host or 'unknown'} running these cases was lost, and again after a "
                f"retry; the cases did not finish")
    return f"the task failed on the cluster (host {host or 'unknown'}): {type(exc).__name__}: {exc}"


class TaskLoop:
    """Runs tasks on ``session`` until ``make_next`` has none left and none is in flight.

    ``make_next()`` returns ``(future, meta)`` for the next task or None; ``on_result(meta,
    result)`` and ``on_failure(meta, text, host)`` take each finished task, in the order they
    finish. ``capacity`` tasks are kept in flight. ``pinned_host(meta)`` names the host a
    task may only run on (None: any), so that a host that lost all its workers fails its
    tasks instead of leaving them waiting.
    """

    def __init__(self, session: ClusterSession, make_next: Callable[[], Any], on_result: Callable[[Any, Any], None],
                 on_failure: Callable[[Any, str, str | None], None], capacity: int,
                 pinned_host: Callable[[Any], str | None] | None = None):
        self.session, self._make_next, self._on_result, self._on_failure = session, make_next, on_result, on_failure
        self.capacity = max(1, capacity)
        self._pinned = pinned_host or (lambda meta: None)
        self._meta: dict[Any, Any] = {}
        self._exhausted = False
        self._host_gone_since: dict[str, float] = {}
        self._next_hosts_look = 0.0

    def _fill(self, waiting: Any) -> None:
        while not self._exhausted and len(self._meta) < self.capacity:
            made = self._make_next()
            if made is None:
                self._exhausted = True
                return
            future, meta = made
            self._meta[future] = meta
            waiting.add(future)

    def run(self) -> None:
        """Run every task; return when all are done.

        Raises
        ------
        ClusterLost
            When the scheduler was unreachable for :data:`SCHEDULER_LOST_SECONDS` (the tasks
            in flight are dropped; the caller writes what finished).
        KeyboardInterrupt
            An interruption: the tasks in flight are cancelled first.
        """
        from distributed import as_completed

        waiting = as_completed(loop=self.session.client.loop)
        lost_since: float | None = None
        try:
            self._fill(waiting)
            while self._meta:
                if waiting.has_ready():
                    for future in waiting.next_batch(block=False):
                        self._finish(future)
                    self._fill(waiting)
                    lost_since = None
                    continue
                time.sleep(POLL_SECONDS)
                if not self.session.alive():
                    lost_since = lost_since or time.monotonic()
                    if time.monotonic() - lost_since > SCHEDULER_LOST_SECONDS:
                        raise ClusterLost(f"the Dask scheduler at {self.session.target.text} went away mid-run")
                else:
                    lost_since = None
                    self._fail_lost_hosts()
        except ClusterLost:
            self._meta.clear()
            raise
        except BaseException as exc:
            if not isinstance(exc, KeyboardInterrupt) and not self.session.alive():
                self._meta.clear()
                raise ClusterLost(f"the Dask scheduler at {self.session.target.text} went away mid-run") from None
            self.cancel()
            raise

    def cancel(self) -> None:
        """Cancel every task in flight (at most a short wait: the scheduler may be gone)."""
        futures = list(self._meta)
        self._meta.clear()
        if futures:
            try:
                call_with_timeout(lambda: self.session.client.cancel(futures, force=True), 5.0, "cancelling tasks")
            except Exception:  # noqa: BLE001 - a scheduler that is gone cancels nothing
                pass

    def _finish(self, future: Any) -> None:
        meta = self._meta.get(future)
        if meta is None:
            return
        if future.status != "finished" and not self.session.alive():  # dropped with the scheduler: no finding
            raise ClusterLost(f"the Dask scheduler at {self.session.target.text} went away mid-run")
        self._meta.pop(future)
        if future.status == "finished":
            try:
                result = future.result(timeout=SCHEDULER_LOST_SECONDS)
            except Exception as exc:  # noqa: BLE001 - a result that cannot be fetched is a failed task
                self._on_failure(meta, failure_text(exc, None), None)
                return
            self._on_result(meta, result)
            return
        if future.status == "error":
            try:
                exc = future.exception(timeout=SCHEDULER_LOST_SECONDS)
            except Exception as fetch_error:  # noqa: BLE001
                exc = fetch_error
            host = failure_host(exc)
            self._on_failure(meta, failure_text(exc, host), host)
            return
        self._on_failure(meta, f"the task was {future.status} by the cluster; its cases did not finish", None)

    def _fail_lost_hosts(self) -> None:
        """Fail the pinned tasks of hosts that have had no worker for :data:`HOST_LOST_SECONDS`."""
        now = time.monotonic()
        pinned = {self._pinned(meta) for meta in self._meta.values()} - {None}
        if not pinned or now < self._next_hosts_look:
            return
        self._next_hosts_look = now + HOSTS_LOOK_SECONDS
        try:
            info = call_with_timeout(lambda: self.session.client.scheduler_info(n_workers=-1), 5.0, "the workers' list")
        except Exception:  # noqa: BLE001 - the scheduler check above decides about a lost scheduler
            return
        present = {w.get("host") for w in info.get("workers", {}).values()}
        for host in pinned:
            if host in present:
                self._host_gone_since.pop(host, None)
                continue
            since = self._host_gone_since.setdefault(host, now)
            if now - since > HOST_LOST_SECONDS:
                for future, meta in list(self._meta.items()):
                    if self._pinned(meta) == host:
                        self._meta.pop(future)
                        future.cancel()
                        self._on_failure(meta, f"every Dask worker of host {host} was lost; the cases did not "
                                               f"finish", host)
