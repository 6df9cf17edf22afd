"""Test servers for fftgauge's pipe protocol, version 1: one well-behaved, the others each
misbehaving in one documented way. Run as ``python protocol_servers.py MODE [ignored arguments]``.

Written from the protocol's specification in docs/external-fftgauge.backends.md, independently of
backends/external_program.py (the struct layouts are spelled out again here on purpose).
The correct modes compute with numpy.fft.

Modes:

ok                a correct server, all four kinds, float32 and float64, all norms,
                  reports its own elapsed time
ok-untimed        the same, but it does not time itself
exit-at-once      exits with code 3 before reading anything (a message on stderr)
garbage-hello     prints a text banner on stdout instead of answering the hello
silent            reads its input but never answers anything
wrong-version     answers the hello in protocol version 2
version-status    answers the hello with status 4 (unsupported version) and a message
short-hello       answers the hello with a 3-byte record
garbage-response  a correct hello, then text instead of a response to each transform
wrong-length      a correct hello, then transform responses one real short
short-payload     a correct hello, then announces the right length, sends half, and waits
hang              a correct hello, then never answers a transform
crash-mid-run     answers two transforms correctly, then aborts (SIGABRT) on the third,
                  after writing half a response header
error-status      a correct hello, then status 3 with a message for every transform
grandchild-hang   starts a sleeping child process of its own, then never answers a
                  transform (the harness must kill the whole process group)
"""

from __future__ import annotations

import os
import struct
import subprocess
import sys
import time

import numpy as np

REQUEST = struct.Struct("<4sHHBBBBIQQ")   # magic, version, op, kind, precision, norm, reserved, count, n, payload_bytes
RESPONSE = struct.Struct("<4sHHIIQQ")     # magic, version, status, flags, reserved, elapsed_ns, payload_bytes
HELLO = struct.Struct("<BBBBIQ")          # kinds, precisions, norms, flags, reserved, max_n
KINDS = ("fft", "ifft", "rfft", "irfft")
NORMS = ("backward", "ortho", "forward")

stdin = sys.stdin.buffer
stdout = sys.stdout.buffer


def send(status: int, payload: bytes = b"", elapsed_ns: int | None = None, version: int = 1) -> None:
    flags = 0 if elapsed_ns is None else 1
    stdout.write(RESPONSE.pack(b"FGRS", version, status, flags, 0, elapsed_ns or 0, len(payload)) + payload)
    stdout.flush()


def hello_payload(self_timed: bool) -> bytes:
    flags = 2 if self_timed else 0
    return HELLO.pack(0x0F, 0x03, 0x07, flags, 0, 0) + b"python test server 1"


def read_request() -> tuple | None:
    header = stdin.read(REQUEST.size)
    if len(header) < REQUEST.size:
        return None
    magic, version, op, kind, precision, norm, _, count, n, size = REQUEST.unpack(header)
    payload = stdin.read(size) if size else b""
    return op, kind, precision, norm, count, n, payload


def transform(kind: int, precision: int, norm: int, count: int, n: int, payload: bytes) -> tuple[bytes, int]:
    """Return (output payload, elapsed ns) for one transform request, computed with numpy.fft."""
    real = np.dtype("<f4" if precision == 4 else "<f8")
    cplx = np.dtype("<c8" if precision == 4 else "<c16")
    name = KINDS[kind]
    in_dtype = real if name == "rfft" else cplx
    xs = np.frombuffer(payload, dtype=in_dtype).reshape(count, -1)
    start = time.perf_counter_ns()
    fn = getattr(np.fft, name)
    if name == "irfft":
        ys = fn(xs, n=n, axis=1, norm=NORMS[norm])
    else:
        ys = fn(xs, axis=1, norm=NORMS[norm])
    elapsed = time.perf_counter_ns() - start
    out = ys.astype(real if name == "irfft" else cplx)
    return out.tobytes(), elapsed


def serve(mode: str) -> int:
    transforms = 0
    if mode == "grandchild-hang":
        subprocess.Popen([sys.executable, "-c", "import time; time.sleep(600)"])
    while True:
        request = read_request()
        if request is None:
            return 0
        op, kind, precision, norm, count, n, payload = request
        if op == 1:
            if mode == "wrong-version":
                send(0, hello_payload(True), version=2)
            elif mode == "version-status":
                send(4, b"this server speaks protocol version 7")
            elif mode == "short-hello":
                send(0, b"\x0f\x03\x01")
            else:
                send(0, hello_payload(mode != "ok-untimed"))
            continue
        transforms += 1
        if mode in ("hang", "grandchild-hang"):
            time.sleep(600)
            return 0
        if mode == "garbage-response":
            stdout.write(b"Result: 0.0 0.0 1.0 ...\n")
            stdout.flush()
            continue
        if mode == "error-status":
            send(3, b"DSP bridge not ready")
            continue
        out, elapsed = transform(kind, precision, norm, count, n, payload)
        if mode == "wrong-length":
            send(0, out[:-precision], elapsed)
            continue
        if mode == "short-payload":
            stdout.write(RESPONSE.pack(b"FGRS", 1, 0, 1, 0, elapsed, len(out)) + out[:len(out) // 2])
            stdout.flush()
            time.sleep(600)
            return 0
        if mode == "crash-mid-run" and transforms == 3:
            stdout.write(RESPONSE.pack(b"FGRS", 1, 0, 1, 0, elapsed, len(out))[:16])
            stdout.flush()
            os.abort()
        send(0, out, None if mode == "ok-untimed" else elapsed)


def main(argv: list[str]) -> int:
    if len(argv) < 2:  # arguments after the mode are accepted and ignored
        print(__doc__, file=sys.stderr)
        return 2
    mode = argv[1]
    if mode == "exit-at-once":
        print("protocol test server: exiting at once as asked", file=sys.stderr)
        return 3
    if mode == "garbage-hello":
        stdout.write(b"Starting FFT server v2.3 ...\nready\n")
        stdout.flush()
        time.sleep(600)
        return 0
    if mode == "silent":
        while stdin.read(1):
            pass
        return 0
    return serve(mode)


if __name__ == "__main__":
    sys.exit(main(sys.argv))
