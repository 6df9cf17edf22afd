"""Starting a worker's child process, and the handle the worker keeps on it.

Two ways to start one:

- ``"subprocess"`` (the default): a fresh interpreter, ``python -c`` importing
  :mod:`fftgauge.harness.execution.child` and serving on a socket the parent passes as a
  file descriptor (:func:`subprocess.Popen` with ``pass_fds``). Nothing of the parent's
  ``__main__`` is imported, so a plain script that calls the Python API without an
  ``if __name__ == "__main__":`` guard runs once, and a notebook works the same way. The
  child starts in its scratch folder, in a session of its own, with standard input closed,
  standard output on ``os.devnull`` and standard error in the worker's log from its first
  line (an import error before the child is ready is in the log, and in the reason).
- a :mod:`multiprocessing` start method (``"spawn"``, ``"forkserver"``, ``"fork"``), for
  callers that need one; ``spawn`` and ``forkserver`` import the parent's main script in
  the child (so that script needs the guard), ``fork`` copies the parent.

Either way the worker gets a :class:`ChildHandle` (``pid``, ``exitcode``, ``is_alive``,
``join``, ``terminate``, ``kill``, ``close`` and :meth:`ChildHandle.wait_for`) and the
parent's end of a :func:`multiprocessing.Pipe`.
"""

from __future__ import annotations

import multiprocessing
import multiprocessing.connection
import os
import subprocess
import sys
import time
from typing import Any

import fftgauge
from fftgauge.harness.execution.child import ChildSettings, child_main

#: The start method of a fresh interpreter (POSIX): what a worker uses unless told otherwise.
SUBPROCESS = "subprocess"
#: The start method a worker uses unless told otherwise (``spawn`` where not POSIX).
DEFAULT_START_METHOD = SUBPROCESS if os.name == "posix" else "spawn"
#: How often, in seconds, a wait polls a child where no process descriptor is available.
POLL_SECONDS = 0.05
#: What the interpreter runs in a ``"subprocess"`` child: put fftgauge's folder first on
#: the import path, then serve on the file descriptor given.
BOOT_SOURCE = ("import sys; sys.path.insert(0, sys.argv[1]); "
               "from fftgauge.harness.execution.child import serve; serve(int(sys.argv[2]))")


def start_methods() -> list[str]:
    """Return the start methods this platform offers (``"subprocess"`` first where POSIX)."""
    own = [SUBPROCESS] if os.name == "posix" else []
    return own + multiprocessing.get_all_start_methods()


class ChildHandle:
    """The worker's handle on its child: a :class:`subprocess.Popen` or a
    :class:`multiprocessing.Process`, seen through the same few methods."""

    def __init__(self, proc: Any):
        self._proc = proc
        self._popen = isinstance(proc, subprocess.Popen)
        self._pidfd: int | None = None
        if self._popen and hasattr(os, "pidfd_open"):
            try:
                self._pidfd = os.pidfd_open(proc.pid)
            except OSError:  # an old kernel: waits poll instead
                self._pidfd = None

    @property
    def pid(self) -> int:
        """The child's process id."""
        return self._proc.pid

    @property
    def exitcode(self) -> int | None:
        """The exit code (negative: the signal that ended it), or None while it runs."""
        return self._proc.poll() if self._popen else self._proc.exitcode

    def is_alive(self) -> bool:
        """Return True while the child runs."""
        return self.exitcode is None

    def join(self, timeout: float | None = None) -> None:
        """Wait up to ``timeout`` seconds (None: for ever) for the child to end, and reap it."""
        if not self._popen:
            self._proc.join(timeout)
            return
        try:
            self._proc.wait(timeout)
        except subprocess.TimeoutExpired:
            pass

    def terminate(self) -> None:
        """Send SIGTERM (nothing when it has ended)."""
        if self.is_alive():
            try:
                self._proc.terminate()
            except ProcessLookupError:
                pass

    def kill(self) -> None:
        """Send SIGKILL (nothing when it has ended)."""
        if self.is_alive():
            try:
                self._proc.kill()
            except ProcessLookupError:
                pass

    def close(self) -> None:
        """Release the handle's resources (after :meth:`join`)."""
        if self._pidfd is not None:
            os.close(self._pidfd)
            self._pidfd = None
        if not self._popen:
            self._proc.close()

    def wait_for(self, conn: Any, timeout: float | None) -> str:
        """Wait up to ``timeout`` seconds (None: for ever) for a message on ``conn`` or the
        child's end. Returns ``"message"``, ``"ended"`` or ``"timeout"``."""
        sentinel = self._pidfd if self._popen else self._proc.sentinel
        if sentinel is not None:
            ready = multiprocessing.connection.wait([conn, sentinel], timeout)
            return "message" if conn in ready else "ended" if ready else "timeout"
        deadline = None if timeout is None else time.monotonic() + timeout
        while True:
            if conn.poll(POLL_SECONDS):
                return "message"
            if not self.is_alive():
                return "message" if conn.poll(0) else "ended"
            if deadline is not None and time.monotonic() >= deadline:
                return "timeout"


def start_child(settings: ChildSettings, start_method: str, log_path: str) -> tuple[ChildHandle, Any]:
    """Start a child that serves ``settings`` and return ``(handle, parent's connection)``.

    Raises
    ------
    OSError
        When the process cannot be started (the interpreter is missing, no processes left).
    """
    if start_method == SUBPROCESS:
        return _start_subprocess(settings, log_path)
    ctx = multiprocessing.get_context(start_method)
    parent_conn, child_conn = ctx.Pipe(duplex=True)
    # A forked child inherits the parent's end too; it must close it, or it would never
    # see end-of-file when the parent goes. Spawned children get only what is passed.
    inherited = parent_conn if start_method == "fork" else None
    process = ctx.Process(target=child_main, name=f"fftgauge-worker {settings.spec}",
                          args=(child_conn, settings, inherited))
    process.start()
    child_conn.close()
    return ChildHandle(process), parent_conn


def _start_subprocess(settings: ChildSettings, log_path: str) -> tuple[ChildHandle, Any]:
    parent_conn, child_conn = multiprocessing.Pipe(duplex=True)
    package_parent = os.path.dirname(os.path.dirname(os.path.abspath(fftgauge.__file__)))
    fd = child_conn.fileno()
    try:
        with open(log_path, "ab") as log:
            proc = subprocess.Popen(
                [sys.executable, "-c", BOOT_SOURCE, package_parent, str(fd)],
                stdin=subprocess.DEVNULL, stdout=subprocess.DEVNULL, stderr=log, pass_fds=(fd,),
                cwd=settings.scratch_dir, start_new_session=True)
    except BaseException:
        parent_conn.close()
        raise
    finally:
        child_conn.close()
    parent_conn.send(settings)
    return ChildHandle(proc), parent_conn
