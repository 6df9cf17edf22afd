"""The running program behind an ``exec:`` backend: starting it, one request at a time
with deadlines, and stopping it with everything it started.

The program leads its own process group, and a small watchdog process kills that group
should the process that started it die without stopping it (a worker killed after a
timeout), so a hung program is never left behind. Every wait has a deadline (selectors on
the pipes; POSIX only). The bytes on the pipes are the codec's
(:mod:`fftgauge.backends.pipe_protocol`).
"""

from __future__ import annotations

import os
import selectors
import signal
import subprocess
import sys
import tempfile
import threading
import time
import weakref
from typing import BinaryIO

from fftgauge.backends.pipe_protocol import (PROTOCOL_VERSION, RESPONSE_HEADER, Hello, ProgramExited,
                                             ProgramFailure, ProgramTimeout, ProtocolError, Response,
                                             check_response_start, decode_hello, decode_response_header,
                                             encode_hello, one_line, status_failure)

#: Seconds a program gets to exit after its stdin is closed, before it is killed.
EXIT_GRACE_SECONDS = 2.0
#: Seconds to wait for a killed program to be reaped.
REAP_SECONDS = 5.0
_STDERR_TAIL_BYTES = 400

#: The watchdog: a tiny process that holds the read end of a pipe whose write end only this
#: process holds. Told "q" it exits quietly (normal stop); at end-of-file, which is what it
#: sees when this process dies in any way (SIGKILL from a worker timeout included), it kills
#: the program's process group. So a hung program never outlives the process that started it.
_WATCHDOG_SOURCE = (
    "import os, signal, sys\n"
    "if not sys.stdin.buffer.read(1):\n"
    "    try:\n"
    "        os.killpg(int(sys.argv[1]), signal.SIGKILL)\n"
    "    except OSError:\n"
    "        pass\n"
)


def _start_watchdog(pgid: int) -> subprocess.Popen | None:
    """Start the watchdog of process group ``pgid`` (see :data:`_WATCHDOG_SOURCE`), or return
    None when it cannot be started (the program then runs without one)."""
    try:
        return subprocess.Popen([sys.executable, "-I", "-S", "-c", _WATCHDOG_SOURCE, str(pgid)],
                                stdin=subprocess.PIPE, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
                                close_fds=True, start_new_session=True)
    except OSError:
        return None


def _stop_watchdog(watchdog: subprocess.Popen | None) -> None:
    """Tell the watchdog to exit without killing anything, and reap it. Never raises."""
    if watchdog is None:
        return
    try:
        watchdog.stdin.write(b"q")
        watchdog.stdin.close()
    except (OSError, ValueError):
        pass
    try:
        watchdog.wait(timeout=REAP_SECONDS)
    except subprocess.TimeoutExpired:
        watchdog.kill()
        watchdog.wait(timeout=REAP_SECONDS)


def _stop_process(proc: subprocess.Popen, stderr_file: BinaryIO | None, grace_seconds: float,
                  watchdog: subprocess.Popen | None = None) -> None:
    """Close the program's stdin, give it ``grace_seconds`` to exit, kill its process group
    otherwise, and reap it; then stop its watchdog. Never raises."""
    try:
        if proc.stdin is not None and not proc.stdin.closed:
            proc.stdin.close()
    except OSError:
        pass
    try:
        proc.wait(timeout=grace_seconds)
    except subprocess.TimeoutExpired:
        _kill(proc)
    for stream in (proc.stdout, stderr_file):
        try:
            if stream is not None:
                stream.close()
        except OSError:
            pass
    _stop_watchdog(watchdog)


def _kill(proc: subprocess.Popen) -> None:
    """Kill the program's process group (it leads its own session) and reap it."""
    if proc.poll() is None:
        try:
            os.killpg(proc.pid, signal.SIGKILL)
        except (ProcessLookupError, PermissionError):
            try:
                proc.kill()
            except ProcessLookupError:
                pass
    try:
        proc.wait(timeout=REAP_SECONDS)
    except subprocess.TimeoutExpired:  # pragma: no cover - a process stuck in the kernel
        pass


class ProgramConnection:
    """One running program and its pipes: start, hello, request/response with deadlines.

    Thread-safe: one request at a time. After any failure but a non-zero status the
    program is killed; the next :meth:`request` starts a fresh one (counted in
    :attr:`restarts`).
    """

    def __init__(self, argv: list[str], timeout_seconds: float, start_timeout_seconds: float):
        self.argv = argv
        self.timeout_seconds = timeout_seconds
        self.start_timeout_seconds = start_timeout_seconds
        self.restarts = 0
        self.hello: Hello | None = None
        self._proc: subprocess.Popen | None = None
        self._stderr: BinaryIO | None = None
        self._finalizer: weakref.finalize | None = None
        self._lock = threading.RLock()
        self._started_once = False

    # -- life cycle -----------------------------------------------------------------------
    @property
    def pid(self) -> int | None:
        """The running program's process id, or None when none is running."""
        return self._proc.pid if self._proc is not None else None

    def start(self) -> Hello:
        """Start the program and exchange the hello; return what it declared.

        Raises
        ------
        OSError
            When the program cannot be started at all.
        ProgramFailure
            When it exits, times out or answers the hello wrongly (it is then killed).
        """
        with self._lock:
            self.stop()
            if self._started_once:
                self.restarts += 1
            self._started_once = True
            self._stderr = tempfile.TemporaryFile()
            try:
                self._proc = subprocess.Popen(self.argv, stdin=subprocess.PIPE, stdout=subprocess.PIPE,
                                              stderr=self._stderr, bufsize=0, close_fds=True,
                                              start_new_session=True)
            except OSError:
                self._stderr.close()
                self._stderr = None
                raise
            os.set_blocking(self._proc.stdin.fileno(), False)
            watchdog = _start_watchdog(self._proc.pid)
            self._finalizer = weakref.finalize(self, _stop_process, self._proc, self._stderr,
                                               EXIT_GRACE_SECONDS, watchdog)
            response = self._exchange([encode_hello()], "the hello", None,
                                      self.start_timeout_seconds)
            if response.status != 0:
                self.kill()
                raise status_failure(response.status, response.payload, "the hello")
            try:
                self.hello = decode_hello(response.payload)
            except ProtocolError:
                self.kill()
                raise
            return self.hello

    def stop(self) -> None:
        """Close the program's stdin and let it exit (killed after a grace period); reap it."""
        with self._lock:
            if self._finalizer is not None:
                self._finalizer()
            self._finalizer, self._proc, self._stderr = None, None, None

    def kill(self) -> None:
        """Kill the program now (its whole process group) and reap it."""
        with self._lock:
            if self._proc is not None:
                _kill(self._proc)
            self.stop()

    def ensure_running(self) -> None:
        """Start the program again (with its hello) when it is not running.

        Raises
        ------
        ProgramFailure
            When it cannot be started or fails the hello.
        """
        with self._lock:
            if self._proc is None or self._proc.poll() is not None:
                try:
                    self.start()
                except OSError as exc:
                    raise ProgramExited(f"cannot restart {self.argv[0]!r}: {one_line(exc)}") from None

    # -- requests -------------------------------------------------------------------------
    def request(self, header: bytes, payload: memoryview | None, expected_bytes: int | None,
                what: str, version: int = PROTOCOL_VERSION) -> Response:
        """Send one request, return its response; start (or restart) the program if needed.

        ``expected_bytes`` is the payload length a status-0 response must have (``None``: a
        message of at most :data:`MAX_MESSAGE_BYTES`, as a hello answer is); ``version`` the
        request's protocol version, which the answer must carry (2 for shaped requests).

        Raises
        ------
        ProgramFailure
            (a subclass) for every way the exchange can fail; see the module docstring.
        """
        with self._lock:
            self.ensure_running()
            parts = [header] if payload is None else [header, payload]
            response = self._exchange(parts, what, expected_bytes, self.timeout_seconds, version)
            if response.status != 0:
                raise status_failure(response.status, response.payload, what)
            return response

    def _exchange(self, parts: list, what: str, expected_bytes: int | None, timeout_seconds: float,
                  version: int = PROTOCOL_VERSION) -> Response:
        """Write ``parts`` and read one response (in ``version``), both before a deadline; kill on failure."""
        try:
            return self._exchange_or_raise(parts, what, expected_bytes, timeout_seconds, version)
        except ProgramFailure:
            self.kill()
            raise

    def _exchange_or_raise(self, parts: list, what: str, expected_bytes: int | None,
                           timeout_seconds: float, version: int = PROTOCOL_VERSION) -> Response:
        proc = self._proc
        assert proc is not None and proc.stdin is not None and proc.stdout is not None
        deadline = time.monotonic() + timeout_seconds
        pending = [memoryview(p).cast("B") for p in parts if len(p)]
        header = bytearray()
        payload: bytearray | None = None
        got = 0
        out_fd, in_fd = proc.stdin.fileno(), proc.stdout.fileno()
        with selectors.DefaultSelector() as sel:
            sel.register(in_fd, selectors.EVENT_READ)
            if pending:
                sel.register(out_fd, selectors.EVENT_WRITE)
            while True:
                left = deadline - time.monotonic()
                if left <= 0:
                    raise ProgramTimeout(f"program gave no complete answer to {what} within "
                                         f"{timeout_seconds:g} s; it was killed")
                for key, _ in sel.select(left):
                    if key.fd == out_fd:
                        try:
                            sent = os.write(out_fd, pending[0])
                        except BlockingIOError:
                            continue
                        except (BrokenPipeError, ConnectionResetError):
                            raise self._exited(what) from None
                        pending[0] = pending[0][sent:]
                        if not len(pending[0]):
                            pending.pop(0)
                        if not pending:
                            sel.unregister(out_fd)
                        continue
                    if payload is None:
                        chunk = os.read(in_fd, RESPONSE_HEADER.size - len(header))
                        if not chunk:
                            raise self._exited(what)
                        header += chunk
                        check_response_start(header, what)
                        if len(header) < RESPONSE_HEADER.size:
                            continue
                        status, elapsed_ns, size = decode_response_header(header, what, expected_bytes, version)
                        payload = bytearray(size)
                        if size == 0:
                            return Response(status, elapsed_ns, payload)
                        continue
                    n_read = os.readv(in_fd, [memoryview(payload)[got:]])
                    if n_read == 0:
                        raise self._exited(what)
                    got += n_read
                    if got == len(payload):
                        if pending:
                            raise ProtocolError(f"program answered {what} before reading the whole request")
                        return Response(status, elapsed_ns, payload)

    def _exited(self, what: str) -> ProgramExited:
        proc = self._proc
        code = None
        if proc is not None:
            try:
                code = proc.wait(timeout=1.0)
            except subprocess.TimeoutExpired:
                code = None
        how = f"exited with code {code}" if code is not None else "closed its output"
        if code is not None and code < 0:
            try:
                how = f"was killed by {signal.Signals(-code).name}"
            except ValueError:
                pass
        return ProgramExited(f"program {how} before answering {what}{self._stderr_tail()}")

    def _stderr_tail(self) -> str:
        f = self._stderr
        if f is None:
            return ""
        try:
            f.flush()
            size = f.seek(0, os.SEEK_END)
            f.seek(max(0, size - _STDERR_TAIL_BYTES))
            text = one_line(f.read().decode("utf-8", "replace"))
        except (OSError, ValueError):
            return ""
        return f"; its stderr ends: {text}" if text else ""
