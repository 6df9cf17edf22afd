"""Worker processes: untrusted backend code runs in a child, so that a crash, a hang or a
runaway allocation becomes a :class:`~fftgauge.harness.errors.BackendFailure`, never the end of a run.

A :class:`Worker` owns one child process that loads one backend from its SPEC string (once
per child) and runs *jobs* on it: a job is a function ``func(backend, *args)`` of
:mod:`fftgauge.harness.execution.jobs`, passed by the function object; the child looks it
up there by name.

How the child is run, and why
-----------------------------
- **Start method.** A fresh interpreter (:mod:`~fftgauge.harness.execution.launch`), so no
  lock, thread pool or OpenMP runtime of the parent is inherited half-initialised
  (``fork`` after threads have started is unsafe, and numpy's BLAS, pyFFTW and scipy's
  workers all start threads). It imports what the child needs (this package, numpy, the
  registry and the one backend) and never the parent's main script, so the Python API
  works from a plain script without an ``if __name__ == "__main__":`` guard and from a
  notebook. The :mod:`multiprocessing` start methods remain available (``start_method=``).
- **Talking.** One :func:`multiprocessing.Pipe` (a socket pair; the child's end is passed
  as a file descriptor). The child first reports that the backend loaded (or why it did
  not); then each call sends ``(func, args, CPU seconds)`` and waits on both the pipe and
  the process (a process descriptor), so a dead child is noticed at once, not when the
  timeout runs out. The job's exception is turned into a one-line reason *in the child*
  and sent as text, so an exception that cannot be pickled still comes back readable.
- **Timeouts.** When a job overruns, the child is asked (SIGUSR1, through
  :mod:`faulthandler`) where it is, then stopped with ``terminate()`` and, after
  :data:`KILL_GRACE_SECONDS`, ``kill()``; it is always joined, so no zombie is left. The
  next call starts a fresh child, so the remaining jobs go on.
- **Output.** The child's standard output goes to ``os.devnull`` (at the file-descriptor
  level, so C code that prints is silenced too): a chatty backend must not garble the
  parent's terminal or progress bar, and nothing a backend prints is a result. Its
  standard error goes to a private log file that the parent reads after a crash:
  :mod:`faulthandler` writes the crashing Python stack there, and the reason names the
  innermost frame in the backend's code. The log is emptied before every job, so it stays
  small. SIGINT is ignored in the child: on Ctrl-C the parent decides, and stops it. Core
  dumps are switched off in the child (``RLIMIT_CORE`` = 0).
- **Working folder.** Each child runs its jobs in a scratch folder of its own
  (:attr:`Worker.scratch_dir`, removed when the child stops), so a backend that writes or
  deletes files in its working folder never touches the user's. The backend is loaded in
  the user's folder (this process's working folder), so relative paths in a SPEC start
  there, and that folder stays on the child's import path (the parent's import path is
  passed on, its ``""`` entry made the user's folder, and the folder added last where
  absent), so the user's own modules are found.
- **Limits.** Each child runs under a memory cap (by default half of the physical memory
  divided by ``concurrency``, at least 2 GiB; ``memory_limit_bytes=None`` lifts it) and
  each job under a CPU-time limit beside its wall-clock timeout; see
  :mod:`~fftgauge.harness.execution.limits` for which resource limits and why. An
  allocation past the cap fails in the backend, and the :class:`MemoryError` becomes
  "exceeded the memory cap of X GiB (MemoryError ...)"; a job that times out with its
  memory at the cap is reported as "exceeded the memory cap of X GiB and did not finish
  within N s", so a hog is never read as a slow backend nor left to the system's
  out-of-memory killer.
- **Descendants.** The child leads a session of its own and is a child subreaper (Linux),
  and every process it starts inherits a token in its environment, so whatever a backend
  starts (a plain child, one in a new session, a daemon) is found and ended when the
  child stops (:mod:`~fftgauge.harness.execution.processes`). :attr:`Worker.left_running`
  says how many processes the last job left running, :attr:`Worker.processes_ended` how
  many the worker had to end, and a failure reason says so too.
- **Leftovers.** :meth:`Worker.close` (also on leaving a ``with`` block) stops the child; an
  exception in the parent during a call (KeyboardInterrupt included) stops it too; an
  :mod:`atexit` hook closes every worker still open; and the child watches its parent and
  exits when the parent has gone (a pure-Python hang included; code that holds the GIL
  forever is only stopped by the parent). A worker dropped without :meth:`Worker.close`
  closes its pipe when collected, and its child then exits; closing explicitly is still
  the rule (a ``with`` block). Under ``fork`` a child inherits every open descriptor of
  the parent, other workers' pipes included; it closes its own worker's end, and the
  watch on the parent covers the rest.

A :class:`Worker` is not thread-safe: use each one from one thread.

Examples
--------
>>> import numpy as np
>>> from fftgauge.harness.cases import Case
>>> from fftgauge.harness.execution import jobs
>>> with Worker("numpy") as worker:                                 # doctest: +SKIP
...     y = worker.call(jobs.plan_and_execute, Case("fft", "float64", 8),
...                     np.ones(8, complex), timeout_seconds=30)
>>> y[0]                                                            # doctest: +SKIP
np.complex128(8+0j)
"""

from __future__ import annotations

import atexit
import math
import multiprocessing.util  # noqa: F401 - its atexit hook must be registered before ours
import os
import secrets
import shutil
import signal
import sys
import tempfile
import time
import weakref
from multiprocessing.reduction import ForkingPickler
from typing import Any, Callable, Iterable, Iterator

import numpy as np

from fftgauge.harness.errors import BackendFailure, UnsupportedCase, UsageError
from fftgauge.harness.execution import jobs
from fftgauge.harness.execution.child import ChildSettings
from fftgauge.harness.execution.launch import DEFAULT_START_METHOD, start_child, start_methods
from fftgauge.harness.execution.crash import (death_reason, describe_exception, ended_text, leftover_text,
                                              memory_cap_text, read_log_tail, remove_file, thread_stack, truncate_log,
                                              user_location)
from fftgauge.harness.execution.limits import cpu_seconds_for, default_memory_limit_bytes, memory_in_use_bytes
from fftgauge.harness.execution.processes import end_processes, kill_group, wait_gone, worker_processes

#: Seconds a child gets to exit after ``terminate()`` (SIGTERM) before ``kill()`` (SIGKILL).
KILL_GRACE_SECONDS = 1.0
#: Share of the memory cap past which a job that timed out is said to have reached the cap.
NEAR_CAP_FRACTION = 0.9
#: Seconds a child told to stop gets to close its backend and say how many processes it ended.
CLOSE_WAIT_SECONDS = 5.0
#: Default seconds a fresh child gets to start and load its backend (imports included).
START_TIMEOUT_SECONDS = 120.0
#: Seconds the parent waits for a timed-out child to report where it is.
STACK_DUMP_WAIT_SECONDS = 0.5

_LIVE_WORKERS: "weakref.WeakSet[Worker]" = weakref.WeakSet()


# -- the parent's side -------------------------------------------------------------------------
class Worker:
    """A child process that loads one backend from its SPEC string and runs jobs on it.

    Parameters
    ----------
    spec : the backend SPEC (``numpy``, ``pyfftw[threads=2]``, ``file.py:fn``, ...). It is
        parsed and loaded in the child only, on the first call.
    threads : passed to :func:`fftgauge.backends.registry.load_backend` in the child.
    memory_limit_bytes : the child's memory cap in bytes (see
        :mod:`~fftgauge.harness.execution.limits`); ``"auto"`` (the default) for
        :func:`~fftgauge.harness.execution.limits.default_memory_limit_bytes` of
        ``concurrency``; ``None`` lifts the cap.
    concurrency : how many workers run at once (the default cap is shared between them).
    cpu_limit_seconds : CPU-time limit of each job (``RLIMIT_CPU``); ``None`` (the default)
        for the job's timeout times the CPU count plus a few seconds (never before the timeout).
    start_method : ``"subprocess"`` (the default: a fresh interpreter that never imports the
        caller's main script), or a :mod:`multiprocessing` start method.
    start_timeout_seconds : how long a fresh child may take to start and load the backend.

    Raises
    ------
    UsageError
        For a start method this platform lacks, or a non-positive ``threads``,
        ``memory_limit_bytes``, ``concurrency``, ``cpu_limit_seconds`` or
        ``start_timeout_seconds``.
    """

    def __init__(self, spec: str, threads: int | None = None, memory_limit_bytes: int | str | None = "auto",
                 concurrency: int = 1, cpu_limit_seconds: float | None = None,
                 start_method: str = DEFAULT_START_METHOD, start_timeout_seconds: float = START_TIMEOUT_SECONDS):
        if start_method not in start_methods():
            raise UsageError(f"start method {start_method!r} is not available here; use one of "
                             f"{', '.join(start_methods())}")
        for name, value in (("threads", threads), ("concurrency", concurrency),
                            ("memory_limit_bytes", None if memory_limit_bytes == "auto" else memory_limit_bytes)):
            if value is not None and (not isinstance(value, (int, np.integer)) or value < 1):
                raise UsageError(f"{name} must be a positive integer, got {value!r}")
        if cpu_limit_seconds is not None and not (isinstance(cpu_limit_seconds, (int, float))
                                                  and cpu_limit_seconds > 0):
            raise UsageError(f"cpu_limit_seconds must be positive, got {cpu_limit_seconds!r}")
        # A crash under a cap the caller chose names the cap (it may be too tight); the
        # generous default is not named on every crash.
        self._cap_chosen = memory_limit_bytes != "auto"
        if memory_limit_bytes == "auto":
            memory_limit_bytes = default_memory_limit_bytes(int(concurrency))
        if not start_timeout_seconds > 0:
            raise UsageError(f"start_timeout_seconds must be positive, got {start_timeout_seconds!r}")
        self.spec = spec
        self.threads = threads
        #: The memory cap in bytes (None: none).
        self.memory_limit_bytes = None if memory_limit_bytes is None else int(memory_limit_bytes)
        self.cpu_limit_seconds = cpu_limit_seconds
        self._job_cpu_seconds: float | None = None
        self.start_method = start_method
        self.start_timeout_seconds = float(start_timeout_seconds)
        #: How many children this worker has started (a crash or timeout costs one more).
        self.starts = 0
        #: How many processes started by the last job were still running when it returned.
        self.left_running = 0
        #: How many processes the backend started that the worker had to end (when it
        #: stopped a child: at close, after a crash or a timeout).
        self.processes_ended = 0
        self._token = secrets.token_hex(16)
        self._known_pids: set[int] = set()
        self._subreaper = False
        self._aborted = False
        self._process: Any = None
        self._conn: Any = None
        self._main_ident: int | None = None
        self._log_path: str | None = None
        self._log_remover: Any = None
        self._usage_error: str | None = None
        self._closed = False
        #: The current child's scratch folder (its working folder; None when no child runs).
        self.scratch_dir: str | None = None
        self._scratch_remover: Any = None
        _LIVE_WORKERS.add(self)

    # -- public ------------------------------------------------------------------------------
    @property
    def pid(self) -> int | None:
        """Process id of the current child, or ``None`` when none is running."""
        return self._process.pid if self._process is not None else None

    def call(self, func: Callable[..., Any], *args: Any, timeout_seconds: float) -> Any:
        """Run ``func(backend, *args)`` in the child and return its (picklable) result.

        Parameters
        ----------
        func : a job function of :mod:`fftgauge.harness.execution.jobs`.
        *args : picklable arguments after the backend.
        timeout_seconds : how long the job may run (the child's start-up is not counted).

        Returns
        -------
        Any
            What the function returned.

        Raises
        ------
        UsageError
            When the SPEC cannot be loaded in the child (the child's one-line message; the
            worker remembers it and raises it again on later calls without a new child).
        UnsupportedCase
            When the job raised :class:`UnsupportedCase` (the backend refused the case).
        BackendFailure
            When the job raised (reason: ``"ValueError: ... (at file.py:12 in fn)"``), the
            child died (``"the backend crashed (signal 11, SIGSEGV) ..."``, ``"the backend
            aborted (signal 6, SIGABRT) ..."``, ``"the backend exited with code 3"``), the job
            overran (``"did not finish within 30 s; killed ..."``), ran out of memory
            (``"ran out of memory (MemoryError ...)"``) or returned something that cannot be
            sent back. After a death or timeout the next call starts a fresh child.
        ValueError
            When ``func`` is not a job of :mod:`~fftgauge.harness.execution.jobs` or
            ``timeout_seconds`` is not positive (a programming error, not the user's).
        RuntimeError
            When the worker is closed.
        """
        if not jobs.is_job(func):
            raise ValueError(f"{func!r} is not a job of {jobs.__name__}")
        if not timeout_seconds > 0:
            raise ValueError(f"timeout_seconds must be positive, got {timeout_seconds!r}")
        if math.isinf(timeout_seconds):
            timeout_seconds = None  # wait() takes None for "no limit"
        if self._closed:
            raise RuntimeError("this worker is closed")
        if self._usage_error is not None:
            raise UsageError(self._usage_error)
        cpu_seconds = cpu_seconds_for(timeout_seconds, self.cpu_limit_seconds)
        # Unpicklable args are the caller's bug: raised here, as they are.
        request = bytes(ForkingPickler.dumps((func.__name__, args, cpu_seconds)))
        try:
            self._ensure_child()
            truncate_log(self._log_path)
            try:
                self._conn.send_bytes(request)
            except OSError:  # the child died between jobs and after the liveness check
                raise self._death_failure(during="") from None
            self.left_running = 0
            self._job_cpu_seconds = cpu_seconds
            status, payload, left = self._await_reply(timeout_seconds, loading=False)
        except (BackendFailure, UsageError):
            raise
        except BaseException:  # KeyboardInterrupt included: a child in an unknown state goes
            self._stop_child()
            raise
        self.left_running = len(left)
        self._known_pids.update(left)
        if status == "ok":
            return payload
        if status == "unsupported":
            raise UnsupportedCase(payload)
        if status == "bad-func":
            raise RuntimeError(payload)
        raise BackendFailure(payload + (f"; {leftover_text(len(left))}" if left else ""))

    def close(self) -> None:
        """Stop the child (asking it first, then terminate/kill) and remove its log. Idempotent."""
        self._closed = True
        if self._process is not None and self._process.is_alive() and self._conn is not None:
            try:
                self._conn.send_bytes(bytes(ForkingPickler.dumps(None)))
                if self._conn.poll(CLOSE_WAIT_SECONDS):
                    status, ended = self._conn.recv()
                    if status == "bye":
                        self.processes_ended += ended
                self._process.join(KILL_GRACE_SECONDS)
            except (OSError, ValueError, EOFError, TypeError):
                pass
        self._stop_child()
        if self._log_remover is not None:
            self._log_remover()
            self._log_path = self._log_remover = None
        _LIVE_WORKERS.discard(self)

    def abort(self) -> None:
        """Kill the child and every process its backend started, at once, without waiting.

        The one method that may be called from another thread (a signal handler's, while a
        lane's thread waits in :meth:`call`): that call then raises
        ``BackendFailure("stopped: the run was interrupted")`` and the worker can still be
        closed (which reaps what was killed). Never raises.
        """
        process = self._process
        if process is None:
            return
        self._aborted = True
        try:
            end_processes(worker_processes(process.pid, self._token, set(self._known_pids)))
            kill_group(process.pid)
            process.kill()
        except Exception:  # noqa: BLE001 - the run is stopping; what is left, close() reaps
            pass

    def __enter__(self) -> "Worker":
        return self

    def __exit__(self, *exc_info: Any) -> None:
        self.close()

    def __repr__(self) -> str:
        state = "closed" if self._closed else f"pid {self.pid}" if self.pid else "idle"
        return f"Worker({self.spec!r}, {state})"

    # -- the child's life --------------------------------------------------------------------
    def _ensure_child(self) -> None:
        """Start a child and wait until it has loaded the backend, unless one is running."""
        if self._process is not None:
            if self._process.is_alive():
                return
            self._stop_child()  # it died between jobs: start afresh, blame no job
        if self._log_path is None:
            fd, self._log_path = tempfile.mkstemp(prefix="fftgauge-worker-", suffix=".log")
            os.close(fd)
            # Removed by close(), or when a worker nobody closed is collected or at exit.
            self._log_remover = weakref.finalize(self, remove_file, self._log_path)
        truncate_log(self._log_path)
        self.scratch_dir = tempfile.mkdtemp(prefix="fftgauge-scratch-")
        self._scratch_remover = weakref.finalize(self, shutil.rmtree, self.scratch_dir, ignore_errors=True)
        settings = ChildSettings(
            spec=self.spec, threads=self.threads, memory_limit_bytes=self.memory_limit_bytes,
            load_cpu_seconds=cpu_seconds_for(self.start_timeout_seconds, self.cpu_limit_seconds),
            log_path=self._log_path, parent_pid=os.getpid(), token=self._token,
            user_dir=user_folder(), scratch_dir=self.scratch_dir, sys_path=tuple(sys.path))
        try:
            self._process, self._conn = start_child(settings, self.start_method, self._log_path)
        except OSError as exc:
            raise BackendFailure(f"the worker process could not be started: {describe_exception(exc)}") from None
        self.starts += 1
        self._job_cpu_seconds = cpu_seconds_for(self.start_timeout_seconds, self.cpu_limit_seconds)
        status, payload = self._await_reply(self.start_timeout_seconds, loading=True)
        if status == "usage":
            self._usage_error = payload
            self._stop_child()
            raise UsageError(payload)
        self._main_ident = payload["main_thread"]
        self._subreaper = payload.get("subreaper", False)
        if not payload.get("memory_capped", True):
            self.memory_limit_bytes = None  # this platform has no cap: never blame one

    def _await_reply(self, timeout_seconds: float | None, loading: bool) -> tuple:
        """Return the child's next message (``(status, payload)`` when loading, else
        ``(status, payload, left)``), or stop the child and raise BackendFailure."""
        during = " while loading" if loading else ""
        ready = self._process.wait_for(self._conn, timeout_seconds)
        if ready == "message":
            try:
                data = self._conn.recv_bytes()
            except (EOFError, OSError):
                raise self._death_failure(during) from None
            try:
                return ForkingPickler.loads(data)
            except Exception as exc:  # the child is fine; only its answer is unreadable here
                raise BackendFailure(f"the job's result cannot be read in the main process: "
                                     f"{describe_exception(exc)}") from None
        if ready == "ended":
            raise self._death_failure(during)
        where = self._ask_where()
        at_cap = self._at_memory_cap()
        ended = self._stop_child()
        what = "finish loading" if loading else "finish"
        raise BackendFailure((f"{memory_cap_text(self.memory_limit_bytes)} and " if at_cap else "")
                             + f"did not {what} within {timeout_seconds:g} s; killed"
                             + (f" (it was at {where})" if where else "")
                             + (f"; {ended_text(ended)}" if ended else ""))

    def _death_failure(self, during: str) -> BackendFailure:
        """Reap the dead (or dying) child and return the BackendFailure saying how it died."""
        self._process.join(KILL_GRACE_SECONDS)
        code = self._process.exitcode
        log = read_log_tail(self._log_path)
        ended = self._stop_child()
        tail = f"; {ended_text(ended)}" if ended else ""
        if self._aborted:
            self._aborted = False
            return BackendFailure("stopped: the run was interrupted")
        if code is None:  # the pipe broke but the process lived on: it has been stopped now
            return BackendFailure(f"the backend closed its connection to the main process{during}; "
                                  f"stopped{tail}")
        cap = self.memory_limit_bytes if self._cap_chosen else None
        return BackendFailure(death_reason(code, log, during, cap, self._job_cpu_seconds) + tail)

    def _at_memory_cap(self) -> bool:
        """Return True when the running child's memory is within
        :data:`NEAR_CAP_FRACTION` of its cap (a job stopped there ran into the cap)."""
        if self.memory_limit_bytes is None or self._process is None:
            return False
        used = memory_in_use_bytes(self._process.pid)
        return used is not None and used >= NEAR_CAP_FRACTION * self.memory_limit_bytes

    def _ask_where(self) -> str | None:
        """Return where the running child's main thread is, via faulthandler's SIGUSR1 dump."""
        if not hasattr(signal, "SIGUSR1") or self._process is None or not self._process.is_alive():
            return None
        try:
            os.kill(self._process.pid, signal.SIGUSR1)
        except OSError:
            return None
        deadline = time.monotonic() + STACK_DUMP_WAIT_SECONDS
        while time.monotonic() < deadline:
            time.sleep(0.05)
            frames = thread_stack(read_log_tail(self._log_path), self._main_ident)
            if frames:
                return user_location(frames)
        return None

    def _stop_child(self) -> int:
        """End every process the backend started, then terminate, kill and join the child;
        close the pipe. Returns how many of the backend's processes had to be ended (they are
        added to :attr:`processes_ended`). Safe to call twice."""
        process, conn = self._process, self._conn
        self._process = self._conn = None
        if conn is not None:
            conn.close()
        if process is None:
            return 0
        alive = process.exitcode is None
        # While the child lives (a subreaper) its descendants are its children's tree; after
        # it died (also while it is being read: worker_processes asks again), or where it is
        # no subreaper, they are found by the token they inherited.
        procs = worker_processes(process.pid, self._token, self._known_pids)
        ended = end_processes(procs)
        kill_group(process.pid)  # its session's group: what it started with no new session
        if process.exitcode is None:
            process.terminate()
            process.join(KILL_GRACE_SECONDS)
        if process.exitcode is None:
            process.kill()
        process.join()
        process.close()
        if procs:  # stragglers forked while the first ones were ended (the child reaped: found by token)
            # A process sent SIGKILL above may still show as running (the signal not yet
            # delivered on a loaded machine): it is not counted, nor signalled, twice.
            more = [proc for proc in worker_processes(None, self._token) if proc not in procs]
            ended += end_processes(more)
            procs += more
        wait_gone(procs)
        if self._scratch_remover is not None:  # the child's scratch folder goes with it
            self._scratch_remover()
            self.scratch_dir = self._scratch_remover = None
        self._known_pids.clear()
        self.processes_ended += ended
        return ended


def user_folder() -> str | None:
    """Return the user's folder (this process's working folder), or None when it has gone."""
    try:
        return os.getcwd()
    except OSError:
        return None


def run_jobs(worker: Worker, func: Callable[..., Any], arg_list: Iterable[tuple], timeout_seconds: float
             ) -> Iterator[tuple[tuple, Any]]:
    """Run ``func(backend, *args)`` for every ``args`` in ``arg_list``, each with its own timeout.

    Yields
    ------
    (args, outcome)
        ``outcome`` is the job's result, or the :class:`BackendFailure` or
        :class:`UnsupportedCase` it ended with; a failed job never stops the batch (the
        worker restarts its child when needed).

    Raises
    ------
    UsageError
        When the SPEC cannot be loaded (no job of the batch can run).
    """
    for args in arg_list:
        args = tuple(args)
        try:
            yield args, worker.call(func, *args, timeout_seconds=timeout_seconds)
        except (BackendFailure, UnsupportedCase) as exc:
            yield args, exc


@atexit.register
def _close_all_workers() -> None:
    """Close every worker still open when the interpreter exits."""
    for worker in list(_LIVE_WORKERS):
        try:
            worker.close()
        except Exception:  # noqa: BLE001 - exiting anyway; never mask the real exit
            pass
