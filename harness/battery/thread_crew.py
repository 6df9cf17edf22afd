"""The threads of the ``concurrent`` check: a crew started once per process and reused, and
the thread-pool caps its tasks run under.

Starting four threads costs milliseconds on a busy machine, more than the calls themselves
at small n, so every case's ``concurrent`` check hands its calls to the same crew.

A thread-pool cap (threadpoolctl: OpenMP's ``omp_set_num_threads``, MKL's thread count) may
hold only in the thread that set it, and a library's result may depend bitwise on its thread
count. :func:`thread_caps` reads the caps the calling thread runs under and
:func:`thread_caps_applied` sets them inside another thread, so the ``concurrent`` check's
threads run the backend as the calling thread does.
"""

from __future__ import annotations

import os
import queue
import sys
import threading
import time
from contextlib import contextmanager
from typing import Any, Callable, Iterator

#: Threads in the crew (the ``concurrent`` check's threads).
CREW_SIZE = 4


class ThreadCrew:
    """A fixed set of daemon threads that run one task each, all at the same time, on request.

    :meth:`run` hands ``tasks[i]`` to thread ``i`` and waits until every one has returned.
    The threads live as long as the process (or until a task overruns, see :func:`thread_crew`).
    """

    def __init__(self, size: int):
        self.size = size
        self._inboxes: list[queue.SimpleQueue] = [queue.SimpleQueue() for _ in range(size)]
        self._done: queue.SimpleQueue = queue.SimpleQueue()
        self._lock = threading.Lock()
        #: The process that started the threads (a forked child has none of them).
        self.pid = os.getpid()
        #: True once a task overran: its thread may still be busy, so the crew is not reused.
        self.broken = False
        for i, inbox in enumerate(self._inboxes):
            threading.Thread(target=self._serve, args=(inbox,), name=f"fftgauge-concurrent-{i}", daemon=True).start()

    def _serve(self, inbox: queue.SimpleQueue) -> None:
        while True:
            task = inbox.get()
            try:
                task()
            except BaseException:  # noqa: BLE001 - a task reports its own failures; the crew goes on
                pass
            finally:
                self._done.put(None)

    def run(self, tasks: list[Callable[[], None]], timeout_seconds: float) -> bool:
        """Run ``tasks[i]`` on thread ``i`` (at most :attr:`size` tasks) and wait for them.

        Returns True when every task returned within ``timeout_seconds`` (counted from the
        start), False otherwise (the crew must then not be used again: a thread is still busy).

        Raises
        ------
        ValueError
            For more tasks than threads.
        RuntimeError
            When the crew is broken (see :func:`thread_crew`, which replaces such a crew).
        """
        if len(tasks) > self.size:
            raise ValueError(f"{len(tasks)} tasks for a crew of {self.size} threads")
        with self._lock:
            if self.broken:
                raise RuntimeError("internal: this thread crew has a thread still busy with an overrun task")
            for inbox, task in zip(self._inboxes, tasks):
                inbox.put(task)
            end = time.monotonic() + timeout_seconds
            for _ in tasks:
                try:
                    self._done.get(timeout=max(0.0, end - time.monotonic()))
                except queue.Empty:
                    self.broken = True
                    return False
            return True


_CREW: list[ThreadCrew] = []
_CREW_LOCK = threading.Lock()


def thread_crew() -> ThreadCrew:
    """Return this process's crew of ``CREW_SIZE`` threads, starting it when there is none.

    A crew whose task overran (a thread still stuck in a backend) is replaced by a fresh one,
    as is a crew inherited through ``fork`` (its threads do not exist in the child).
    """
    with _CREW_LOCK:
        if _CREW and (_CREW[0].pid != os.getpid() or _CREW[0].broken):
            _CREW.clear()
        if not _CREW:
            _CREW.append(ThreadCrew(CREW_SIZE))
        return _CREW[0]


#: (len(sys.modules), threadpoolctl controller) of this process, made again after new imports
#: (a thread-pool library arrives with an import; scanning the loaded libraries costs milliseconds).
_CONTROLLER: list[tuple[int, Any]] = []


def _controller() -> Any:
    from threadpoolctl import ThreadpoolController

    if not _CONTROLLER or _CONTROLLER[0][0] != len(sys.modules):
        _CONTROLLER[:] = [(len(sys.modules), ThreadpoolController())]
    return _CONTROLLER[0][1]


def thread_caps() -> tuple[tuple[Any, int], ...]:
    """Return the thread-pool caps the calling thread runs under: ``(library, threads)`` for
    every pool threadpoolctl finds loaded (BLAS, OpenMP), ``library`` its controller."""
    return tuple((lib, int(lib.num_threads)) for lib in _controller().lib_controllers)


@contextmanager
def thread_caps_applied(caps: tuple[tuple[Any, int], ...]) -> Iterator[None]:
    """Run the block with ``caps`` (from :func:`thread_caps`) set in the calling thread, and
    set back what the thread had before on leaving."""
    saved = [(lib, int(lib.num_threads)) for lib, _ in caps]
    for lib, threads in caps:
        if int(lib.num_threads) != threads:
            lib.set_num_threads(threads)
    try:
        yield
    finally:
        for lib, threads in saved:
            if int(lib.num_threads) != threads:
                lib.set_num_threads(threads)
