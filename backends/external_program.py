"""An FFT in another program, spoken to over its stdin/stdout in a small binary protocol.

SPEC (docs/external-backends.md has the full reference, the protocol included)::

    exec:PROGRAM [ARG ...][key=value,...]

The command line is split like a POSIX shell would split it (:func:`shlex.split`) but is
never run through a shell. ``PROGRAM`` is a path (relative to the current folder) or a
name looked up on ``PATH``. Options (parsed and checked by the registry): ``timeout``
(seconds to wait for one response, default 30) and ``start_timeout`` (seconds for the
program to start and answer the hello, default 10); for a q15/q31 program ``output_shift``
and ``rounding``, its declared fixed-point scaling (docs/fixed-point.md).

The program is started once per backend (per worker process) and answers requests until
its stdin closes. Its capabilities (kinds, precisions, norms, powers of two only, largest
size, whether it times itself) come from its answer to the hello. The bytes are the
codec's (:mod:`fftgauge.backends.pipe_protocol`); the running program, its deadlines and
its clean-up are the connection's (:mod:`fftgauge.backends.program_connection`): a program
that does not answer in time is killed; one that exits, writes something that is not a
response, or answers with a payload of the wrong length raises a :class:`ProgramFailure`
(an ``error`` row) and is killed; the next request starts a fresh one.

Timing: when the program reports its own elapsed time (hello flag, and a flag on each
response), :attr:`ProgramPlan.last_self_seconds` holds it after each ``execute`` and
:attr:`ExternalProgramBackend.reports_own_timing` is True: a timer should prefer that number
(for a board behind a serial bridge it is the only meaningful one) and say so in its rows.
"""

from __future__ import annotations

import os
import shlex
import shutil
import time
from typing import Any

import numpy as np

from fftgauge.backends.base import Backend, Capabilities, OptionSpec, Plan
from fftgauge.backends.pipe_protocol import (PRECISION_BYTES, ProgramExited, ProgramFailure,
                                             ProgramStatus, ProgramTimeout, ProtocolError, encode_hello,
                                             encode_transform, one_line, payload_reals)
from fftgauge.backends.program_connection import ProgramConnection
from fftgauge.backends.program_shaped import ProgramShapedPlan, shaped_kinds_of, shaped_reason
from fftgauge.harness.shapes.case import ShapeCase
from fftgauge.harness.cases import FIXED_DTYPES, Case
from fftgauge.harness.errors import UsageError
from fftgauge.harness.fixed.declared import FixedScaling
from fftgauge.harness.fixed.formats import ROUNDINGS

SCHEME = "exec"

#: HELLO round trips in :meth:`ExternalProgramBackend.round_trip_overhead_seconds`.
ROUND_TRIPS = 21

#: The failures an ``exec:`` plan raises (defined with the codec), named here for callers.
FAILURES = (ProgramFailure, ProgramExited, ProgramTimeout, ProtocolError, ProgramStatus)


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
        # q15/q31: (n, 2) integer pairs, sent as 2n integers a row (docs/fixed-point.md)
        self._pairs = case.dtype in FIXED_DTYPES
        self._row_values = self._in_reals if self._pairs else case.input_length
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
        if self._pairs and xs.ndim == 3:  # rows of (n, 2) pairs
            xs = xs.reshape(xs.shape[0], -1)
        count = xs.shape[0]
        if xs.ndim != 2 or xs.shape[1] != self._row_values:
            raise ValueError(f"{self.case.label()} takes rows of {self._row_values} values, got "
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
        out = np.frombuffer(response.payload, dtype=self._wire_out).reshape(count, case.output_length,
                                                                             *((2,) if self._pairs else ()))
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


def fixed_scaling_option(spec: str, output_shift: str, rounding: str) -> FixedScaling | None:
    """Return the q15/q31 scaling the SPEC's ``output_shift=``/``rounding=`` declare (None
    without ``output_shift``: the fixed-point checks then give ``error`` rows saying so).

    Raises
    ------
    UsageError
        For a malformed shift, or ``block`` (the protocol carries no per-call exponent).
    """
    if not output_shift:
        return None
    if output_shift == "block":
        raise UsageError(f"backend {spec!r}: output_shift=block needs a per-call exponent, which the pipe "
                         f"protocol does not carry; give a number of bits or log2n")
    try:
        return FixedScaling(output_shift, rounding=rounding)
    except ValueError as exc:
        raise UsageError(f"backend {spec!r}: {exc}") from None


class ExternalProgramBackend(Backend):
    """An FFT served by a long-lived child program over the pipe protocol.

    Built by :meth:`from_spec` (the registry calls it with the options checked), which
    starts the program and exchanges the hello; re-created from its SPEC in each worker
    process (pickling it pickles the SPEC). Its derived label is ``exec:`` and the
    program's file name (``exec:radix2_server``); two programs of one name need ``label=``.
    """

    name = "exec"
    description = "an external program speaking fftgauge's pipe protocol on stdin/stdout"
    options = {
        "timeout": OptionSpec(float, 30.0, "seconds to wait for one response before killing the program",
                              minimum=0, exclusive_minimum=True),
        "start_timeout": OptionSpec(float, 10.0, "seconds for the program to start and answer the hello",
                                    minimum=0, exclusive_minimum=True),
        "output_shift": OptionSpec(str, "", "q15/q31: bits the output is shifted right of the plain DFT "
                                            "(a number or log2n; docs/fixed-point.md)"),
        "rounding": OptionSpec(str, "round-half-up", "q15/q31: the rounding it promises", choices=ROUNDINGS),
    }

    def __init__(self, spec: str, argv: list[str], **opts: Any):
        super().__init__(**opts)
        self._spec = spec
        self.name = f"{SCHEME}:{os.path.basename(argv[0])}"
        self.argv = argv
        self.fixed = fixed_scaling_option(spec, self.opts["output_shift"], self.opts["rounding"])
        self.connection = ProgramConnection(argv, self.opts["timeout"], self.opts["start_timeout"])
        self._round_trip: float | None = None
        try:
            self.hello = self.connection.start()
        except OSError as exc:
            raise UsageError(f"backend {spec!r}: cannot start {argv[0]!r}: {one_line(exc)}") from None
        except ProgramFailure as exc:
            raise UsageError(f"backend {spec!r}: the program failed the protocol hello: {exc}") from None

    @classmethod
    def from_spec(cls, spec: str, body: str, **opts: Any) -> "ExternalProgramBackend":
        """Return the backend an ``exec:`` SPEC names (``body``: the command line after
        ``exec:``, options already split off and checked by the registry).

        Starts the program and exchanges the hello.

        Raises
        ------
        UsageError
            Malformed command line, a program that does not exist or is not executable, one
            that cannot be started, exits at once, never answers the hello (within
            ``start_timeout``) or answers it wrongly (garbage, another protocol version).
        """
        if os.name != "posix":
            raise UsageError(f"backend {spec!r}: exec: backends need a POSIX system (Linux, macOS)")
        try:
            argv = shlex.split(body)
        except ValueError as exc:
            raise UsageError(f"backend {spec!r}: cannot split the command line: {exc}") from None
        if not argv:
            raise UsageError(f"backend {spec!r}: write exec:path/to/program [args]")
        argv[0] = resolve_program(spec, argv[0])
        return cls(spec, argv, **opts)

    def __reduce__(self) -> tuple:
        from fftgauge.backends.registry import load_backend

        return (load_backend, (self._spec,))

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
                            norms=h.norms, max_n=h.max_n, fixed=self.fixed, shaped_kinds=shaped_kinds_of(h))

    def shaped_unsupported_reason(self, case: ShapeCase) -> str | None:
        """The claims' reason, or that the case has more axes than the program's hello allows."""
        return super().shaped_unsupported_reason(case) or shaped_reason(self.hello, case)

    def plan_shaped(self, case: ShapeCase) -> Plan:
        """Return a :class:`~fftgauge.backends.program_shaped.ProgramShapedPlan` (protocol version 2);
        restarts the program first if it is not running."""
        self.connection.ensure_running()
        return ProgramShapedPlan(case, self.connection)

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

    def details(self) -> dict[str, Any]:
        """The command line, the protocol and the timing source.

        ``round_trip_overhead_seconds`` is ``None`` when the program fails a hello there.
        """
        try:
            round_trip: float | None = self.round_trip_overhead_seconds()
        except ProgramFailure:
            round_trip = None
        return {
            "program": list(self.argv),
            "protocol_version": self.hello.version,  # the highest it speaks (2: shaped requests too)
            "reports_own_timing": self.reports_own_timing,
            "timing_source": "program" if self.reports_own_timing else "adapter",
            "round_trip_overhead_seconds": round_trip,
        }
