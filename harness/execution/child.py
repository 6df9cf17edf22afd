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
import shutil
import signal
import sys
import threading
import time
from dataclasses import dataclass
from multiprocessing.reduction import ForkingPickler
from typing import Any

from fftgauge.harness.errors import BackendFailure, UnsupportedCase, UsageError
from fftgauge.harness.execution import jobs
from fftgauge.harness.execution.crash import (describe_exception, gib, job_failure_reason, one_line, safe_str,
                                              set_user_folder)
from fftgauge.harness.execution.limits import limit_cpu, limit_memory, no_core_dumps
from fftgauge.harness.execution.processes import TOKEN_VARIABLE, become_subreaper, descendant_pids, end_descendants

#: How often, in seconds, the child checks that its parent is still there.
ORPHAN_CHECK_SECONDS = 0.5
#: Exit code of a child that found its owner gone.
ORPHAN_EXIT_CODE = 70


@dataclass(frozen=True)
class ChildSettings:
    """What a child needs from its worker (picklable; sent when the child starts)."""

    #: The backend SPEC and the thread count passed to the registry.
    spec: str
    threads: int | None
    #: The memory cap in bytes (None: none) and the CPU-time limit of loading, in seconds.
    memory_limit_bytes: int | None
    load_cpu_seconds: float | None
    #: The child's standard error (faulthandler's stacks), the process that owns the
    #: worker, and the token every descendant inherits.
    log_path: str
    parent_pid: int
    token: str | None
    #: The user's folder (the parent's working folder, where the backend is loaded and
    #: relative SPEC paths start; kept on the import path) and the child's scratch folder
    #: (its working folder while jobs run). None: stay where the child started.
    user_dir: str | None = None
    scratch_dir: str | None = None
    #: The parent's import path (None: keep the child's own).
    sys_path: tuple[str, ...] | None = None


def serve(fd: int) -> None:
    """Entry point of a child started as its own interpreter (the ``"subprocess"`` start
    method): read the :class:`ChildSettings` from the connection on file descriptor ``fd``,
    then run :func:`child_main`. Returns when the child is done."""
    from multiprocessing.connection import Connection

    conn = Connection(fd)
    try:
        settings = conn.recv()
    except (EOFError, OSError):  # the worker went before sending them
        return
    child_main(conn, settings)


def child_main(conn: Any, settings: ChildSettings, parents_end: Any = None) -> None:
    """Entry point of the child: load the backend, say so, then serve jobs until told to stop
    (or until the parent's end of the pipe closes), and end the processes the backend left.

    Returns when done; raises nothing the parent must catch (a backend that exits or crashes
    ends the process, which the parent sees). ``parents_end`` is, under ``fork``, the copy of
    the parent's end of the pipe that the child inherited (closed at once).
    """
    if parents_end is not None:
        parents_end.close()
    if hasattr(os, "setsid"):
        try:
            os.setsid()  # a session and process group of its own, which the parent kills whole
        except OSError:  # already a group leader
            pass
    subreaper = become_subreaper()
    if settings.token is not None:
        os.environ[TOKEN_VARIABLE] = settings.token
    redirect_outputs(settings.log_path)
    faulthandler.enable(all_threads=False)
    if hasattr(signal, "SIGUSR1"):
        faulthandler.register(signal.SIGUSR1, all_threads=True, chain=False)
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    watch_parent(settings.parent_pid, settings.log_path, settings.scratch_dir)
    no_core_dumps()
    set_import_path(settings.sys_path, settings.user_dir)
    set_user_folder(settings.user_dir)
    spec, threads, memory_limit_bytes = settings.spec, settings.threads, settings.memory_limit_bytes
    if memory_limit_bytes is not None and not limit_memory(memory_limit_bytes):
        memory_limit_bytes = None  # no cap on this platform: never blame one
    limit_cpu(settings.load_cpu_seconds)
    enter(settings.user_dir)  # relative paths in the SPEC start from the user's folder
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
    enter(settings.scratch_dir)  # jobs run in the scratch folder, never in the user's
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
            conn.send_bytes(run_job(backend, request, memory_limit_bytes, settings.user_dir))
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


def run_job(backend: Any, request: tuple, memory_limit_bytes: int | None = None,
            user_dir: str | None = None) -> bytes:
    """Run one job request ``(func name, args, CPU seconds or None)`` on ``backend`` under
    its CPU-time limit and return the pickled reply ``(status, payload, left)``; ``left``
    lists the pids of processes the job started that are still running (see
    :func:`job_reply`; ``memory_limit_bytes`` is the cap in force, for the reason, and
    ``user_dir`` the folder file names in reasons are shown relative to).

    Raises
    ------
    SystemExit
        When the backend asked the process to exit (let through: the parent reports it).
    """
    func, args, cpu_seconds = request
    before = descendant_pids(os.getpid())
    limit_cpu(cpu_seconds)
    try:
        status, payload = job_reply(backend, func, args, memory_limit_bytes, user_dir)
    finally:
        limit_cpu(None)
    left = sorted(descendant_pids(os.getpid()) - before)
    try:
        return bytes(ForkingPickler.dumps((status, payload, left)))
    except Exception as exc:  # noqa: BLE001
        return bytes(ForkingPickler.dumps(("failed", f"the job's result cannot be sent back to the "
                                                     f"main process: {describe_exception(exc)}", left)))


def job_reply(backend: Any, func: str, args: tuple, memory_limit_bytes: int | None = None,
              user_dir: str | None = None) -> tuple[str, Any]:
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
    except BackendFailure as exc:  # the job's own reason, already said for the user
        return "failed", one_line(safe_str(exc))
    except BaseException as exc:  # noqa: BLE001 - any failure of backend code is a result
        return "failed", job_failure_reason(exc, memory_limit_bytes, user_dir)


def set_import_path(sys_path: tuple[str, ...] | None, user_dir: str | None) -> None:
    """Take the parent's import path, with its ``""`` entries (the current folder) made the
    user's folder, and keep the user's folder on it (last, where absent: their own modules
    are found, and never shadow an installed one)."""
    if sys_path is not None:
        sys.path[:] = [user_dir if entry == "" and user_dir else entry for entry in sys_path]
    if user_dir and user_dir not in sys.path:
        sys.path.append(user_dir)


def enter(folder: str | None) -> None:
    """Make ``folder`` the working folder (nothing when None or gone)."""
    if folder is not None:
        try:
            os.chdir(folder)
        except OSError:
            pass


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


def watch_parent(parent_pid: int, log_path: str, scratch_dir: str | None = None) -> None:
    """Exit the child, removing its log and scratch folder, when the process that owns the
    worker has gone.

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
                if scratch_dir is not None:
                    shutil.rmtree(scratch_dir, ignore_errors=True)
                os._exit(ORPHAN_EXIT_CODE)
            time.sleep(ORPHAN_CHECK_SECONDS)

    threading.Thread(target=watch, name="fftgauge-parent-watch", daemon=True).start()
