"""The pipe protocol of ``exec:`` backends, versions 1 and 2, as bytes: encoding requests and
decoding responses, with no process involved (docs/external-backends.md, "The pipe protocol").

Version 2 adds shaped requests (op 3: a whole array, its shape and the axes to transform) and
nothing else. A program says it speaks version 2 in its hello answer (the record's version
field, zero in version 1); 1-D requests stay version 1 for every program, so a version-1
program works as before, and shaped cases are sent only to programs that declared version 2.

Every header is little-endian. A request is a 32-byte :data:`REQUEST_HEADER` and its payload;
a response a 32-byte :data:`RESPONSE_HEADER` and its payload. The answer to a hello carries a
:data:`HELLO_RECORD` and the program's identity text. The failures of a program (exited,
timed out, answered wrongly, answered with a status) are the exception classes here, so the
connection (:mod:`fftgauge.backends.program_connection`) and this codec raise the same ones.
"""

from __future__ import annotations

import struct
from dataclasses import dataclass
from typing import Any

from fftgauge.harness.cases import KINDS, NORMS, Case
from fftgauge.harness.errors import BackendFailure

PROTOCOL_VERSION = 1
REQUEST_MAGIC = b"FGRQ"
RESPONSE_MAGIC = b"FGRS"
#: magic, version, op, kind, precision, norm, reserved, count, n, payload_bytes
REQUEST_HEADER = struct.Struct("<4sHHBBBBIQQ")
#: magic, version, status, flags, reserved, elapsed_ns, payload_bytes
RESPONSE_HEADER = struct.Struct("<4sHHIIQQ")
#: kinds mask, precisions mask, norms mask, flags, version (0 or 1: version 1; 2: shaped
#: requests too), shaped kinds mask, largest rank of one transform, max_n; the identity text follows
HELLO_RECORD = struct.Struct("<BBBBHBBQ")
#: The version of shaped requests (op 3) and of their answers.
SHAPED_VERSION = 2
#: One length or one axis of a shaped request's shape block.
SHAPE_ITEM = struct.Struct("<Q")

OP_HELLO = 1
OP_TRANSFORM = 2
OP_TRANSFORM_SHAPED = 3
KIND_CODES = {kind: i for i, kind in enumerate(KINDS)}            # fft 0, ifft 1, rfft 2, irfft 3
NORM_CODES = {norm: i for i, norm in enumerate(NORMS)}            # backward 0, ortho 1, forward 2
PRECISION_BYTES = {"float32": 4, "float64": 8, "q15": 2, "q31": 4}   # bytes per real (per part: q15/q31)
PRECISION_BITS = {"float32": 1, "float64": 2, "q15": 4, "q31": 8}
#: The request's precision byte: bytes per real for floats; fixed point (q15/q31: (re, im)
#: integer pairs, docs/fixed-point.md) sets bit 7 above its bytes per part, so a program
#: that knows floats alone never takes it for one (it sees no q15 bit in its own hello either).
PRECISION_CODES = {"float32": 4, "float64": 8, "q15": 0x82, "q31": 0x84}
STATUS_NAMES = {0: "ok", 1: "unsupported", 2: "bad request", 3: "transform failed", 4: "unsupported version"}
STATUS_VERSION = 4
RESPONSE_FLAG_ELAPSED = 1
HELLO_FLAG_POW2 = 1
HELLO_FLAG_SELF_TIMED = 2
#: Largest payload accepted with a hello or a non-zero status (a message, not data).
MAX_MESSAGE_BYTES = 65536


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
    #: Highest protocol version the program speaks (1 unless its hello says 2).
    version: int = 1
    #: Version 2: the kinds it transforms on whole arrays, by family (``fft`` also stands for
    #: ``fftn``), and the most axes one transform may have (1: batches of 1-D transforms only).
    shaped_kinds: tuple[str, ...] = ()
    max_rank: int = 0


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
                               PRECISION_CODES[case.dtype], NORM_CODES[case.norm], 0, count, case.n,
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
    kinds_mask, precisions_mask, norms_mask, flags, version, shaped_mask, max_rank, max_n = \
        HELLO_RECORD.unpack_from(payload)
    version = max(1, version)
    shaped = tuple(k for k, i in KIND_CODES.items() if shaped_mask >> i & 1) if version >= SHAPED_VERSION else ()
    kinds = tuple(k for k, i in KIND_CODES.items() if kinds_mask >> i & 1)
    dtypes = tuple(d for d, bit in PRECISION_BITS.items() if precisions_mask & bit)
    norms = tuple(m for m, i in NORM_CODES.items() if norms_mask >> i & 1) or ("backward",)
    if not kinds or not dtypes:
        raise ProtocolError("the hello answer declares no transform kind or no precision")
    identity = bytes(payload[HELLO_RECORD.size:]).decode("utf-8", "replace").strip() or "unnamed program"
    return Hello(kinds, dtypes, norms, bool(flags & HELLO_FLAG_POW2), bool(flags & HELLO_FLAG_SELF_TIMED),
                 max_n or None, identity, version, shaped, max_rank if shaped else 0)


def encode_shaped_transform(case: Any, data_bytes: int) -> bytes:
    """Return the version-2 request header and shape block of a shaped ``case`` (:class:`ShapeCase`).

    Header: op 3, the family's kind code (``fftn`` as ``fft``), precision, norm, the array's
    rank in byte 11, the number of transformed axes as ``count``, ``n`` zero; the payload is the
    shape block (the rank lengths of the logical shape, then the axes, non-negative, in order;
    each a u64) followed by ``data_bytes`` of the array in C order.
    """
    shape, axes = case.shape, case.axes_normalised
    block = b"".join(SHAPE_ITEM.pack(v) for v in (*shape, *axes))
    header = REQUEST_HEADER.pack(REQUEST_MAGIC, SHAPED_VERSION, OP_TRANSFORM_SHAPED, KIND_CODES[case.base_kind],
                                 PRECISION_BYTES[case.dtype], NORM_CODES[case.norm], len(shape), len(axes), 0,
                                 len(block) + data_bytes)
    return header + block


def payload_reals(case: Case) -> tuple[int, int]:
    """Return how many reals one input and one output of ``case`` hold on the wire."""
    per_in = 1 if case.kind == "rfft" else 2
    per_out = 1 if case.kind == "irfft" else 2
    return case.input_length * per_in, case.output_length * per_out



def one_line(text: Any) -> str:
    """Return ``text`` as one line (runs of white space, newlines included, become one blank)."""
    return " ".join(str(text).split())


def status_message(payload: bytes | bytearray) -> str:
    """Return ``": TEXT"`` for the message a non-zero status carries, or ``""`` when it is empty."""
    text = one_line(bytes(payload).decode("utf-8", "replace"))
    return f": {text}" if text else ""


def check_response_start(header: bytes | bytearray, what: str) -> None:
    """Check that the bytes read so far can begin a response (its magic).

    Raises
    ------
    ProtocolError
        When they cannot (the program printed text, or speaks another protocol).
    """
    start = bytes(header[:len(RESPONSE_MAGIC)])
    if not RESPONSE_MAGIC.startswith(start):
        raise ProtocolError(f"program answered {what} with bytes that are not a protocol response "
                            f"(it began {bytes(header[:16])!r}); is it printing text to stdout?")


def decode_response_header(header: bytes | bytearray, what: str, expected_bytes: int | None,
                           version_asked: int = PROTOCOL_VERSION) -> tuple[int, int | None, int]:
    """Return ``(status, elapsed_ns or None, payload_bytes)`` of a complete response header.

    ``expected_bytes`` is the payload length a status-0 response must have; ``None`` (a
    hello answer) or a non-zero status allow a message of at most :data:`MAX_MESSAGE_BYTES`.
    ``version_asked`` is the request's version, the one the answer must be in.

    Raises
    ------
    ProtocolError
        For another protocol version, an oversized message, or a payload of the wrong length.
    """
    _, version, status, flags, _, elapsed_ns, size = RESPONSE_HEADER.unpack(bytes(header))
    if version != version_asked:
        raise ProtocolError(f"program answered {what} in protocol version {version}; fftgauge speaks "
                            f"version {version_asked} (the request's)")
    if status != 0 or expected_bytes is None:
        if size > MAX_MESSAGE_BYTES:
            raise ProtocolError(f"program announced a {size}-byte payload with {what} (status {status}); "
                                f"at most {MAX_MESSAGE_BYTES} are allowed there")
    elif size != expected_bytes:
        raise ProtocolError(f"program answered {what} with a {size}-byte payload; {expected_bytes} bytes "
                            f"were expected (wrong length)")
    return status, (elapsed_ns if flags & RESPONSE_FLAG_ELAPSED else None), size


def status_failure(status: int, payload: bytes | bytearray, what: str) -> ProgramFailure:
    """Return the failure a non-zero ``status`` answer to ``what`` stands for.

    Status 4 (unsupported version) is a :class:`ProtocolError`; any other a
    :class:`ProgramStatus` carrying the status.
    """
    if status == STATUS_VERSION:
        return ProtocolError(f"program does not speak protocol version {PROTOCOL_VERSION} (it answered "
                             f"{what} with status 4){status_message(payload)}")
    return ProgramStatus(f"program answered {what} with status {status} "
                         f"({STATUS_NAMES.get(status, 'program-specific')}){status_message(payload)}", status)
