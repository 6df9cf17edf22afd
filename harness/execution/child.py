"""The child's side of a worker: load one backend, then run jobs sent over a pipe.

:func:`child_main` is what a :class:`~fftgauge.harness.execution.worker.Worker` starts in its
child process. It silences standard output, sends standard error (faulthandler's stacks
included) to the worker's log, ignores SIGINT (the parent decides on Ctrl-C), switches core
dumps off, applies the memory cap (:mod:`~fftgauge.harness.execution.limits`), watches its parent, loads the backend from its SPEC and
says so, then answers one job request at a time until told to stop or until the parent's end
of the pipe closes. Each reply is a pickled ``(status, payload, left)``: ``ok`` with the
job's result, ``unsupported`` or ``failed`` with a one-line reason made here (so an exception
that cannot be pickled still comes back readable), or ``bad-func``; ``left`` lists the
processes the job started that still run. The child leads a session of its own and is a child
subreaper (:mod:`~fftgauge.harness.execution.processes`), so whatever a backend starts stays
findable, and it ends those processes when it stops.
"""

from __future__ import annotations

import faulthandler
import os
import signal
import sys
import threading
import time
from multiprocessing.reduction import ForkingPickler
from typing import Any

from fftgauge.harness.errors import UnsupportedCase, UsageError
from fftgauge.harness.execution import jobs
from fftgauge.harness.execution.crash import describe_exception, gib, job_failure_reason, one_line, safe_str
from fftgauge.harness.execution.limits import limit_cpu, limit_memory, no_core_dumps
from fftgauge.harness.execution.processes import TOKEN_VARIABLE, become_subreaper, descendant_pids, end_descendants

#: How often, in seconds, the child checks that its parent is still there.
ORPHAN_CHECK_SECONDS = 0.5
#: Exit code of a child that found its owner gone.
ORPHAN_EXIT_CODE = 70


def child_main(conn: Any, spec: str, threads: int | None, memory_limit_bytes: int | None,
               log_path: str, parent_pid: int, parents_end: Any = None, token: str | None = None,
               load_cpu_seconds: float | None = None) -> None:
    """Entry point of the child: load the backend, say so, then serve jobs until told to stop
    (or until the parent's end of the pipe closes), and end the processes the backend left.

    Returns when done; raises nothing the parent must catch (a backend that exits or crashes
    ends the process, which the parent sees). ``token`` goes into the environment as
    :data:`~fftgauge.harness.execution.processes.TOKEN_VARIABLE`, for every descendant;
    ``load_cpu_seconds`` is the CPU-time limit of loading the backend (None: none).
    """
    if parents_end is not None:  # fork: the copy of the parent's end this child inherited
        parents_end.close()
    if hasattr(os, "setsid"):
        try:
            os.setsid()  # a session and process group of its own, which the parent kills whole
        except OSError:  # already a group leader
            pass
    subreaper = become_subreaper()
    if token is not None:
        os.environ[TOKEN_VARIABLE] = token
    redirect_outputs(log_path)
    faulthandler.enable(all_threads=False)
    if hasattr(signal, "SIGUSR1"):
        faulthandler.register(signal.SIGUSR1, all_threads=True, chain=False)
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    watch_parent(parent_pid, log_path)
    no_core_dumps()
    if memory_limit_bytes is not None and not limit_memory(memory_limit_bytes):
        memory_limit_bytes = None  # no cap on this platform: never blame one
    limit_cpu(load_cpu_seconds)
    try:
        from fftgauge.backends.registry import load_backend
        backend = load_backend(spec, threads=threads)
    except UsageError as exc:
        conn.send(("usage", one_line(safe_str(exc), 1000)))
        return
    except Exception as exc:  # noqa: BLE001 - an adapter's own constructor may raise anything
        hint = (f" (the memory cap of {gib(memory_limit_bytes)} may be too small)"
                if isinstance(exc, MemoryError) and memory_limit_bytes else "")
        conn.send(("usage", f"backend {spec!r} failed to load: {describe_exception(exc)}{hint}"))
        return
    limit_cpu(None)
    conn.send(("ready", {"main_thread": threading.main_thread().ident, "subreaper": subreaper,
                         "memory_capped": memory_limit_bytes is not None}))
    try:
        while True:
            try:
                request = conn.recv()
            except (EOFError, OSError):  # the parent has gone
                return
            if request is None:  # told to stop: close the backend, end what it left, say how many
                close_backend(backend)
                conn.send(("bye", end_descendants(os.getpid())))
                return
            conn.send_bytes(run_job(backend, request, memory_limit_bytes))
    finally:
        end_descendants(os.getpid())


def close_backend(backend: Any) -> None:
    """Call ``backend.close()`` when the adapter has one (a program's adapter stops its
    program there). Never raises: the child is stopping anyway."""
    close = getattr(backend, "close", None)
    if callable(close):
        try:
            close()
        except BaseException:  # noqa: BLE001 - whatever the adapter's clean-up does, stop
            pass


def run_job(backend: Any, request: tuple, memory_limit_bytes: int | None = None) -> bytes:
    """Run one job request ``(func name, args, CPU seconds or None)`` on ``backend`` under
    its CPU-time limit and return the pickled reply ``(status, payload, left)``; ``left``
    lists the pids of processes the job started that are still running (see
    :func:`job_reply`; ``memory_limit_bytes`` is the cap in force, for the reason).

    Raises
    ------
    SystemExit
        When the backend asked the process to exit (let through: the parent reports it).
    """
    func, args, cpu_seconds = request
    before = descendant_pids(os.getpid())
    limit_cpu(cpu_seconds)
    try:
        status, payload = job_reply(backend, func, args, memory_limit_bytes)
    finally:
        limit_cpu(None)
    left = sorted(descendant_pids(os.getpid()) - before)
    try:
        return bytes(ForkingPickler.dumps((status, payload, left)))
    except Exception as exc:  # noqa: BLE001
        return bytes(ForkingPickler.dumps(("failed", f"the job's result cannot be sent back to the "
                                                     f"main process: {describe_exception(exc)}", left)))


def job_reply(backend: Any, func: str, args: tuple, memory_limit_bytes: int | None = None
              ) -> tuple[str, Any]:
    """Run the job called ``func`` on ``backend`` and return ``(status, payload)``: ``ok`` and
    the result, ``unsupported`` or ``failed`` and a one-line reason, or ``bad-func``.

    Raises
    ------
    SystemExit
        When the backend asked the process to exit (let through: the parent reports it).
    """
    try:
        fn = jobs.resolve(func)
    except LookupError as exc:
        return "bad-func", str(exc)
    try:
        return "ok", fn(backend, *args)
    except SystemExit:
        raise
    except UnsupportedCase as exc:
        return "unsupported", one_line(safe_str(exc))
    except BaseException as exc:  # noqa: BLE001 - any failure of backend code is a result
        return "failed", job_failure_reason(exc, memory_limit_bytes)


def redirect_outputs(log_path: str) -> None:
    """Send fd 1 to ``os.devnull`` and fd 2 to ``log_path`` (appending), for C code as well."""
    for stream in (sys.stdout, sys.stderr):
        try:
            stream.flush()
        except Exception:  # noqa: BLE001 - a closed stream: nothing to flush
            pass
    devnull = os.open(os.devnull, os.O_WRONLY)
    log = os.open(log_path, os.O_WRONLY | os.O_APPEND | os.O_CREAT, 0o600)
    os.dup2(devnull, 1)
    os.dup2(log, 2)
    os.close(devnull)
    os.close(log)


def watch_parent(parent_pid: int, log_path: str) -> None:
    """Exit the child, removing its log, when the process that owns the worker has gone.

    A daemon thread checks every :data:`ORPHAN_CHECK_SECONDS` that ``parent_pid`` still
    exists and that the child has not been re-parented (under ``forkserver`` the child's
    parent is the fork server, not the worker's owner, hence both checks).
    """
    first_ppid = os.getppid()

    def gone() -> bool:
        if os.getppid() != first_ppid:
            return True
        try:
            os.kill(parent_pid, 0)
        except ProcessLookupError:
            return True
        except OSError:  # exists, but not ours to signal
            pass
        return False

    def watch() -> None:
        while True:
            if gone():
                try:
                    os.unlink(log_path)
                except OSError:
                    pass
                end_descendants(os.getpid())
                os._exit(ORPHAN_EXIT_CODE)
            time.sleep(ORPHAN_CHECK_SECONDS)

    threading.Thread(target=watch, name="fftgauge-parent-watch", daemon=True).start()
