"""An FFT in another program, spoken to over its stdin/stdout in a small binary protocol.

SPEC (the part after ``exec:`` is parsed here; docs/external-fftgauge.backends.md has the full
reference, the protocol included)::

    exec:PROGRAM [ARG ...][key=value,...]

The command line is split like a POSIX shell would split it (:func:`shlex.split`) but is
never run through a shell. ``PROGRAM`` is a path (relative to the current folder) or a
name looked up on ``PATH``. Options: ``timeout`` (seconds to wait for one response, default
30) and ``start_timeout`` (seconds for the program to start and answer the hello, default 10).

The program is started once per backend (per worker process) and answers requests until
its stdin closes. Its capabilities (kinds, precisions, norms, powers of two only, largest
size, whether it times itself) come from its answer to the hello. Every wait has a
deadline: a program that does not answer in time is killed; one that exits, writes
something that is not a response, or answers with a payload of the wrong length raises a
:class:`ProgramFailure` (an ``error`` row) and is killed; the next request starts a fresh
one. Killed programs are always reaped. The program leads its own process group, and a
small watchdog process kills that group should the process that started it die without
stopping it (a worker killed after a timeout), so a hung program is never left behind.
POSIX only (Linux, macOS): the deadlines use :mod:`selectors` on the pipes.

Timing: when the program reports its own elapsed time (hello flag, and a flag on each
response), :attr:`ProgramPlan.last_self_seconds` holds it after each ``execute`` and
:attr:`ExternalProgramBackend.reports_own_timing` is True: a timer should prefer that number
(for a board behind a serial bridge it is the only meaningful one) and say so in its rows.
"""

from __future__ import annotations

import os
import selectors
import shlex
import shutil
import signal
import struct
import subprocess
import sys
import tempfile
import threading
import time
import weakref
from dataclasses import dataclass
from typing import Any, BinaryIO

import numpy as np

from fftgauge.backends.base import Backend, Capabilities, OptionSpec, Plan
from fftgauge.backends.shared_library import split_options
from fftgauge.harness.cases import KINDS, NORMS, Case
from fftgauge.harness.errors import BackendFailure, UsageError

SCHEME = "exec"

# -- the protocol, version 1 (docs/external-fftgauge.backends.md, "The pipe protocol") ---------------

PROTOCOL_VERSION = 1
REQUEST_MAGIC = b"FGRQ"
RESPONSE_MAGIC = b"FGRS"
#: magic, version, op, kind, precision, norm, reserved, count, n, payload_bytes
REQUEST_HEADER = struct.Struct("<4sHHBBBBIQQ")
#: magic, version, status, flags, reserved, elapsed_ns, payload_bytes
RESPONSE_HEADER = struct.Struct("<4sHHIIQQ")
#: kinds mask, precisions mask, norms mask, flags, reserved, max_n; the identity text follows
HELLO_RECORD = struct.Struct("<BBBBIQ")

OP_HELLO = 1
OP_TRANSFORM = 2
KIND_CODES = {kind: i for i, kind in enumerate(KINDS)}            # fft 0, ifft 1, rfft 2, irfft 3
NORM_CODES = {norm: i for i, norm in enumerate(NORMS)}            # backward 0, ortho 1, forward 2
PRECISION_BYTES = {"float32": 4, "float64": 8}
PRECISION_BITS = {"float32": 1, "float64": 2}
STATUS_NAMES = {0: "ok", 1: "unsupported", 2: "bad request", 3: "transform failed", 4: "unsupported version"}
STATUS_VERSION = 4
RESPONSE_FLAG_ELAPSED = 1
HELLO_FLAG_POW2 = 1
HELLO_FLAG_SELF_TIMED = 2
#: Largest payload accepted with a hello or a non-zero status (a message, not data).
MAX_MESSAGE_BYTES = 65536

#: Seconds a program gets to exit after its stdin is closed, before it is killed.
EXIT_GRACE_SECONDS = 2.0
#: Seconds to wait for a killed program to be reaped.
REAP_SECONDS = 5.0
#: HELLO round trips in :meth:`ExternalProgramBackend.round_trip_overhead_seconds`.
ROUND_TRIPS = 21
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


class ProgramFailure(BackendFailure):
    """The external program failed a request; the subclasses say how."""


class ProgramExited(ProgramFailure):
    """The program exited (or closed its stdout) before answering."""


class ProgramTimeout(ProgramFailure):
    """The program did not answer within its deadline; it was killed."""


class ProtocolError(ProgramFailure):
    """The program answered with something that is not a valid response."""


class ProgramStatus(ProgramFailure):
    """The program answered a request with a non-zero status (carried in :attr:`status`)."""

    def __init__(self, message: str, status: int):
        super().__init__(message)
        self.status = status


@dataclass(frozen=True)
class Hello:
    """What a program says about itself in its answer to the hello."""

    kinds: tuple[str, ...]
    dtypes: tuple[str, ...]
    norms: tuple[str, ...]
    pow2_only: bool
    self_timed: bool
    max_n: int | None
    identity: str


@dataclass(frozen=True)
class Response:
    """One decoded response: status, the program's own elapsed time (or None), payload."""

    status: int
    elapsed_ns: int | None
    payload: bytearray


def encode_hello() -> bytes:
    """Return the 32-byte hello request (every field after the op is zero)."""
    return REQUEST_HEADER.pack(REQUEST_MAGIC, PROTOCOL_VERSION, OP_HELLO, 0, 0, 0, 0, 0, 0, 0)


def encode_transform(case: Case, count: int, payload_bytes: int) -> bytes:
    """Return the 32-byte request header (little-endian) for ``count`` transforms of ``case``."""
    return REQUEST_HEADER.pack(REQUEST_MAGIC, PROTOCOL_VERSION, OP_TRANSFORM, KIND_CODES[case.kind],
                               PRECISION_BYTES[case.dtype], NORM_CODES[case.norm], 0, count, case.n,
                               payload_bytes)


def decode_hello(payload: bytes) -> Hello:
    """Return the :class:`Hello` a hello payload holds.

    Raises
    ------
    ProtocolError
        When the payload is shorter than the record or declares no kind or no precision.
    """
    if len(payload) < HELLO_RECORD.size:
        raise ProtocolError(f"the hello answer holds {len(payload)} bytes, fewer than the "
                            f"{HELLO_RECORD.size} of its record")
    kinds_mask, precisions_mask, norms_mask, flags, _, max_n = HELLO_RECORD.unpack_from(payload)
    kinds = tuple(k for k, i in KIND_CODES.items() if kinds_mask >> i & 1)
    dtypes = tuple(d for d, bit in PRECISION_BITS.items() if precisions_mask & bit)
    norms = tuple(m for m, i in NORM_CODES.items() if norms_mask >> i & 1) or ("backward",)
    if not kinds or not dtypes:
        raise ProtocolError("the hello answer declares no transform kind or no precision")
    identity = bytes(payload[HELLO_RECORD.size:]).decode("utf-8", "replace").strip() or "unnamed program"
    return Hello(kinds, dtypes, norms, bool(flags & HELLO_FLAG_POW2), bool(flags & HELLO_FLAG_SELF_TIMED),
                 max_n or None, identity)


def payload_reals(case: Case) -> tuple[int, int]:
    """Return how many reals one input and one output of ``case`` hold on the wire."""
    per_in = 1 if case.kind == "rfft" else 2
    per_out = 1 if case.kind == "irfft" else 2
    return case.input_length * per_in, case.output_length * per_out


def _one_line(text: Any) -> str:
    return " ".join(str(text).split())


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
            if response.status == STATUS_VERSION:
                self.kill()
                raise ProtocolError(f"program does not speak protocol version {PROTOCOL_VERSION} (it answered "
                                    f"the hello with status 4){self._message(response.payload)}")
            if response.status != 0:
                self.kill()
                raise ProgramStatus(f"program answered the hello with status {response.status} "
                                    f"({STATUS_NAMES.get(response.status, 'program-specific')})"
                                    f"{self._message(response.payload)}", response.status)
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
                    raise ProgramExited(f"cannot restart {self.argv[0]!r}: {_one_line(exc)}") from None

    # -- requests -------------------------------------------------------------------------
    def request(self, header: bytes, payload: memoryview | None, expected_bytes: int | None,
                what: str) -> Response:
        """Send one request, return its response; start (or restart) the program if needed.

        ``expected_bytes`` is the payload length a status-0 response must have (``None``: a
        message of at most :data:`MAX_MESSAGE_BYTES`, as a hello answer is).

        Raises
        ------
        ProgramFailure
            (a subclass) for every way the exchange can fail; see the module docstring.
        """
        with self._lock:
            self.ensure_running()
            parts = [header] if payload is None else [header, payload]
            response = self._exchange(parts, what, expected_bytes, self.timeout_seconds)
            if response.status != 0:
                raise ProgramStatus(f"program answered {what} with status {response.status} "
                                    f"({STATUS_NAMES.get(response.status, 'program-specific')})"
                                    f"{self._message(response.payload)}", response.status)
            return response

    def _exchange(self, parts: list, what: str, expected_bytes: int | None, timeout_seconds: float) -> Response:
        """Write ``parts`` and read one response, both before a deadline; kill on failure."""
        try:
            return self._exchange_or_raise(parts, what, expected_bytes, timeout_seconds)
        except ProgramFailure:
            self.kill()
            raise

    def _exchange_or_raise(self, parts: list, what: str, expected_bytes: int | None,
                           timeout_seconds: float) -> Response:
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
                        self._check_magic(header, what)
                        if len(header) < RESPONSE_HEADER.size:
                            continue
                        status, elapsed_ns, size = self._decode_header(header, what, expected_bytes)
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

    def _check_magic(self, header: bytearray, what: str) -> None:
        start = bytes(header[:len(RESPONSE_MAGIC)])
        if not RESPONSE_MAGIC.startswith(start):
            raise ProtocolError(f"program answered {what} with bytes that are not a protocol response "
                                f"(it began {bytes(header[:16])!r}); is it printing text to stdout?")

    def _decode_header(self, header: bytearray, what: str, expected_bytes: int | None) -> tuple[int, int | None, int]:
        _, version, status, flags, _, elapsed_ns, size = RESPONSE_HEADER.unpack(bytes(header))
        if version != PROTOCOL_VERSION:
            raise ProtocolError(f"program answered {what} in protocol version {version}; fftgauge speaks "
                                f"version {PROTOCOL_VERSION}")
        if status != 0 or expected_bytes is None:
            if size > MAX_MESSAGE_BYTES:
                raise ProtocolError(f"program announced a {size}-byte payload with {what} (status {status}); "
                                    f"at most {MAX_MESSAGE_BYTES} are allowed there")
        elif size != expected_bytes:
            raise ProtocolError(f"program answered {what} with a {size}-byte payload; {expected_bytes} bytes "
                                f"were expected (wrong length)")
        return status, (elapsed_ns if flags & RESPONSE_FLAG_ELAPSED else None), size

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
            text = _one_line(f.read().decode("utf-8", "replace"))
        except (OSError, ValueError):
            return ""
        return f"; its stderr ends: {text}" if text else ""

    @staticmethod
    def _message(payload: bytearray) -> str:
        text = _one_line(bytes(payload).decode("utf-8", "replace"))
        return f": {text}" if text else ""


class ProgramPlan(Plan):
    """Sends one request per :meth:`execute` and returns the program's answer.

    After each call, :attr:`last_self_seconds` holds the elapsed time the program measured
    itself (None when it reports none) and :attr:`last_round_trip_seconds` the time from
    just before the request is written to the response's last byte read.

    After one timeout, the plan's later calls raise :class:`ProgramTimeout` at once (the
    program was killed; a fresh one starts with the next plan): one hung case costs one
    ``timeout``, not one per call, so it stays within the battery's own case timeout.
    """

    def __init__(self, case: Case, connection: ProgramConnection):
        super().__init__(case)
        self._connection = connection
        little = "<"
        self._wire_in = case.input_dtype.newbyteorder(little)
        self._wire_out = case.output_dtype.newbyteorder(little)
        self._in_reals, self._out_reals = payload_reals(case)
        self._real_bytes = PRECISION_BYTES[case.dtype]
        self.last_self_seconds: float | None = None
        self.last_round_trip_seconds: float | None = None
        #: The timeout this plan met, if any: later calls fail at once instead of waiting again.
        self.timed_out: ProgramTimeout | None = None

    def prepare(self, x: np.ndarray) -> np.ndarray:
        """Return ``x`` as a C-contiguous little-endian array of the input dtype (no timing)."""
        return np.ascontiguousarray(x, dtype=self._wire_in)

    def execute(self, x: np.ndarray) -> np.ndarray:
        """Transform ``x`` in the program; return the output (native byte order).

        Raises
        ------
        ProgramFailure
            When the program fails the request in any way (see the module docstring).
        """
        return self.execute_batch(np.asarray(x).reshape(1, -1))[0]

    def execute_batch(self, xs: np.ndarray) -> np.ndarray:
        """Transform each row of the 2-D ``xs`` in one request; return one output row each.

        :attr:`last_self_seconds` is then the program's time for the whole batch.
        """
        if self.timed_out is not None:
            raise ProgramTimeout(f"not sent: this plan's program already timed out ({self.timed_out})")
        xs = np.ascontiguousarray(xs, dtype=self._wire_in)
        count = xs.shape[0]
        if xs.ndim != 2 or xs.shape[1] != self.case.input_length:
            raise ValueError(f"{self.case.label()} takes rows of {self.case.input_length} values, got "
                             f"shape {xs.shape}")
        case = self.case
        header = encode_transform(case, count, xs.nbytes)
        expected = count * self._out_reals * self._real_bytes
        start = time.perf_counter_ns()
        try:
            response = self._connection.request(header, memoryview(xs.view(np.uint8).reshape(-1)), expected,
                                                f"the request for {count} x {case.label()}")
        except ProgramTimeout as exc:
            self.timed_out = exc
            raise
        self.last_round_trip_seconds = (time.perf_counter_ns() - start) * 1e-9
        self.last_self_seconds = None if response.elapsed_ns is None else response.elapsed_ns * 1e-9
        out = np.frombuffer(response.payload, dtype=self._wire_out).reshape(count, case.output_length)
        if not self._wire_out.isnative:
            out = out.astype(case.output_dtype)
        return out


def resolve_program(spec: str, argv0: str) -> str:
    """Return the absolute path of the program a SPEC names.

    Raises
    ------
    UsageError
        When it does not exist, is not a file, or is not executable.
    """
    if "/" in argv0 or os.sep in argv0:
        full = os.path.abspath(os.path.expanduser(argv0))
        if not os.path.isfile(full):
            raise UsageError(f"backend {spec!r}: no program file {argv0!r}; check the path (relative paths "
                             f"start from the current folder)")
    else:
        found = shutil.which(argv0)
        if found is None:
            raise UsageError(f"backend {spec!r}: no program {argv0!r} on PATH; give its path")
        full = os.path.abspath(found)
    if not os.access(full, os.X_OK):
        raise UsageError(f"backend {spec!r}: {argv0!r} is not executable; run chmod +x {argv0}")
    return full


class ExternalProgramBackend(Backend):
    """An FFT served by a long-lived child program over the pipe protocol.

    Built by :func:`backend_from_spec`, which starts the program and exchanges the hello;
    re-created from its SPEC in each worker process (pickling it pickles the SPEC).
    """

    name = "exec"
    description = "an external program speaking fftgauge's pipe protocol on stdin/stdout"
    options = {
        "timeout": OptionSpec(float, 30.0, "seconds to wait for one response before killing the program"),
        "start_timeout": OptionSpec(float, 10.0, "seconds for the program to start and answer the hello"),
    }

    def __init__(self, spec: str, rest: str, command: str, argv: list[str], **opts: Any):
        super().__init__(**opts)
        self._spec, self._rest = spec, rest
        self.name = f"{SCHEME}:{command}"
        self.argv = argv
        for key in ("timeout", "start_timeout"):
            if not self.opts[key] > 0:
                raise UsageError(f"backend {spec!r}: option {key}={self.opts[key]!r} must be positive seconds")
        self.connection = ProgramConnection(argv, self.opts["timeout"], self.opts["start_timeout"])
        self._round_trip: float | None = None
        try:
            self.hello = self.connection.start()
        except OSError as exc:
            raise UsageError(f"backend {spec!r}: cannot start {argv[0]!r}: {_one_line(exc)}") from None
        except ProgramFailure as exc:
            raise UsageError(f"backend {spec!r}: the program failed the protocol hello: {exc}") from None

    def __reduce__(self) -> tuple:
        return (backend_from_spec, (self._spec, self._rest))

    @property
    def version(self) -> str:
        """The identity text the program sent in its hello (e.g. ``radix2_server 1.0``)."""
        return self.hello.identity

    @property
    def reports_own_timing(self) -> bool:
        """True when the program measures its own elapsed time (see :attr:`ProgramPlan.last_self_seconds`)."""
        return self.hello.self_timed

    def capabilities(self) -> Capabilities:
        h = self.hello
        return Capabilities(kinds=h.kinds, dtypes=h.dtypes, sizes="pow2" if h.pow2_only else "any",
                            norms=h.norms, max_n=h.max_n)

    def plan(self, case: Case) -> Plan:
        """Return a :class:`ProgramPlan`; restarts the program first if it is not running
        (so a restart is timed as planning, not as an execution). Nothing else is sent.

        Raises
        ------
        ProgramFailure
            When the program has to be restarted and fails to start or to answer the hello.
        """
        self.connection.ensure_running()
        return ProgramPlan(case, self.connection)

    def round_trip_overhead_seconds(self) -> float:
        """Return the median seconds of one protocol round trip that computes nothing.

        Measured once (then cached) as :data:`ROUND_TRIPS` hello exchanges: a 32-byte
        request and the hello answer, i.e. the pipes, the two processes' scheduling and
        the protocol's framing. A self-timed program's ``last_self_seconds`` excludes it;
        the adapter's own timing of ``execute`` includes it plus the payload transfer.

        Raises
        ------
        ProgramFailure
            When the program fails a hello.
        """
        if self._round_trip is None:
            samples = []
            for _ in range(ROUND_TRIPS):
                start = time.perf_counter_ns()
                self.connection.request(encode_hello(), None, None, "a hello")
                samples.append(time.perf_counter_ns() - start)
            self._round_trip = float(np.median(samples)) * 1e-9
        return self._round_trip

    def close(self) -> None:
        """Stop the program (stdin closed, killed after a grace period) and reap it."""
        self.connection.stop()

    def describe(self) -> dict[str, Any]:
        """The base description plus the command line, the protocol and the timing source.

        ``round_trip_overhead_seconds`` is ``None`` when the program fails a hello there.
        """
        d = super().describe()
        try:
            round_trip: float | None = self.round_trip_overhead_seconds()
        except ProgramFailure:
            round_trip = None
        d.update({
            "program": list(self.argv),
            "protocol_version": PROTOCOL_VERSION,
            "reports_own_timing": self.reports_own_timing,
            "timing_source": "program" if self.reports_own_timing else "adapter",
            "round_trip_overhead_seconds": round_trip,
        })
        return d


def backend_from_spec(spec: str, rest: str) -> ExternalProgramBackend:
    """Return the backend an ``exec:`` SPEC names (``rest`` is the part after ``exec:``).

    Starts the program and exchanges the hello.

    Raises
    ------
    UsageError
        Malformed command line or option, a program that does not exist or is not
        executable, one that cannot be started, exits at once, never answers the hello
        (within ``start_timeout``) or answers it wrongly (garbage, another protocol version).
    """
    from fftgauge.backends.registry import coerce_options

    if os.name != "posix":
        raise UsageError(f"backend {spec!r}: exec: backends need a POSIX system (Linux, macOS)")
    command, raw = split_options(spec, rest)
    try:
        argv = shlex.split(command)
    except ValueError as exc:
        raise UsageError(f"backend {spec!r}: cannot split the command line: {exc}") from None
    if not argv:
        raise UsageError(f"backend {spec!r}: write exec:path/to/program [args]")
    argv[0] = resolve_program(spec, argv[0])
    opts = coerce_options(spec, ExternalProgramBackend, raw)
    return ExternalProgramBackend(spec, rest, command, argv, **opts)
