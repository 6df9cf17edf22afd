"""Fixed point through the pipe protocol (``exec:``): the q15/q31 precision codes and hello
bits, the C example's Q15 and Q31 servers (examples/c_radix2/radix2_q15_server.c,
radix2_q31_server.c) and their twins without saturation, and the backwards compatibility of
float-only programs.

Sources: the expected outputs are the built-in reference's (harness/fixed/radix2.py), itself
checked bit for bit against exact rational arithmetic in tests/test_fixed_point.py; the
wire layout is docs/external-backends.md's table, read back byte by byte here.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from fftgauge.backends.pipe_protocol import (HELLO_RECORD, REQUEST_HEADER, decode_hello, encode_transform,
                                             payload_reals)
from fftgauge.backends.registry import load_backend
from fftgauge.harness.battery.checks import check_case
from fftgauge.harness.cases import Case
from fftgauge.harness.errors import UsageError
from fftgauge.harness.fixed.checks import fixed_check_case
from fftgauge.harness.fixed.formats import FORMATS, quantise
from fftgauge.harness.fixed.radix2 import FixedRadix2

Q15 = FORMATS["q15"]
Q31 = FORMATS["q31"]
ROOT = Path(__file__).resolve().parent.parent


def q15_server(build: Path, name: str = "radix2_q15_server", options: str = "[output_shift=log2n]"):
    """Return the exec: backend of the example's Q15 server (``name`` in the build folder)."""
    return load_backend(f"exec:{build / name}{options}")


def q31_server(build: Path, name: str = "radix2_q31_server", options: str = "[output_shift=log2n]"):
    """Return the exec: backend of the example's Q31 server (``name`` in the build folder)."""
    return load_backend(f"exec:{build / name}{options}")


# -- the codec, without processes -------------------------------------------------------------

def test_request_precision_byte_of_fixed_point():
    """Byte 9 of the request (docs/external-backends.md): 4/8 for float32/float64 as before,
    0x82/0x84 for q15/q31 (bit 7 fixed point, bytes per part below it); n pairs = 2n parts."""
    fields = {d: REQUEST_HEADER.unpack(encode_transform(Case("fft", d, 8), 1, 0)) for d in
              ("float32", "float64", "q15", "q31")}
    assert {d: f[4] for d, f in fields.items()} == {"float32": 4, "float64": 8, "q15": 0x82, "q31": 0x84}
    assert payload_reals(Case("fft", "q15", 8)) == (16, 16)


def test_hello_precision_bits():
    """Hello byte 1: bit 0 float32, bit 1 float64 (unchanged), bit 2 q15, bit 3 q31."""
    def claimed(mask):
        # bytes 0..3: kinds, precisions, norms, flags; the rest of the record zero
        return decode_hello(bytes([1, mask, 1, 0]) + bytes(HELLO_RECORD.size - 4) + b"p").dtypes
    assert claimed(0x03) == ("float32", "float64")
    assert claimed(0x04) == ("q15",)
    assert claimed(0x0c) == ("q15", "q31")


# -- the C example's Q15 server ---------------------------------------------------------------

def test_q15_server_matches_the_reference_bit_for_bit(c_example_build):
    """Through the protocol, one request per transform and one batch: equal to the built-in
    radix-2 (1/2 per stage, round half up, saturation) at N = 1..4096."""
    backend = q15_server(c_example_build)
    try:
        rng = np.random.default_rng(3)
        for t in range(13):
            n = 1 << t
            x = quantise((rng.uniform(-1, 1, n) + 1j * rng.uniform(-1, 1, n)) * 0.7, Q15)
            plan = backend.plan(Case("fft", "q15", n))
            got = plan.execute(x)
            assert got.shape == (n, 2) and got.dtype == np.int16
            assert np.array_equal(got, FixedRadix2(Q15, "stage", "round-half-up").transform(x).pairs), n
            both = plan.execute_batch(np.stack([x, x[::-1]]))
            assert both.shape == (2, n, 2) and np.array_equal(both[0], got)
            assert plan.last_self_seconds is not None  # the server times itself (hello flag)
    finally:
        backend.close()


def test_q15_server_passes_and_its_twin_without_saturation_fails(c_example_build):
    """The server passes every fixed-point check; the -DMISSING_SATURATION twin fails
    overflow with diagnosis overflow (sums wrap around), N = 16..4096."""
    good, bad = q15_server(c_example_build), q15_server(c_example_build, "radix2_q15_server_broken")
    try:
        for n in (16, 256, 4096):
            rows = {r.check: r for r in fixed_check_case(good, Case("fft", "q15", n), 5)}
            assert {r.status for r in rows.values() if r.check != "round-trip"} == {"pass"}, [r.message for r in rows.values()]
            broken = {r.check: r for r in fixed_check_case(bad, Case("fft", "q15", n), 5)}
            assert (broken["overflow"].status, broken["overflow"].diagnosis) == ("fail", "overflow"), n
            assert "sums wrap around inside" in broken["overflow"].message
    finally:
        good.close()
        bad.close()


def test_float_and_fixed_programs_skip_what_they_do_not_claim(c_example_build):
    """The float-only server (its hello knows no q15 bit) gives q15 skip rows and still
    serves float64; the q15 server gives float64 skip rows."""
    old = load_backend(f"exec:{c_example_build / 'radix2_server'}")
    new = q15_server(c_example_build)
    try:
        rows = check_case(old, Case("fft", "q15", 16), 1)
        assert rows and {r.status for r in rows} == {"skip"} and "q15" in rows[0].message
        x = np.exp(2j * np.pi * np.arange(16) / 16)
        y = old.plan(Case("fft", "float64", 16)).execute(x)
        assert abs(y[1] - 16) < 1e-12 and np.max(np.abs(np.delete(y, 1))) < 1e-12  # a tone at bin 1
        rows = check_case(new, Case("fft", "float64", 16), 1, ["impulse"])
        assert {r.status for r in rows} == {"skip"}
    finally:
        old.close()
        new.close()


def test_exec_q15_declarations(c_example_build):
    """No output_shift: error rows naming the missing declaration; output_shift=block (no
    exponent on the wire) or a malformed shift: a usage error before the program starts."""
    backend = q15_server(c_example_build, options="")
    try:
        rows = fixed_check_case(backend, Case("fft", "q15", 16), 5)
        assert {r.status for r in rows} == {"error"} and "declares no fixed-point scaling" in rows[0].message
    finally:
        backend.close()
    for bad in ("block", "half"):
        with pytest.raises(UsageError, match="output_shift"):
            q15_server(c_example_build, options=f"[output_shift={bad}]")


@pytest.mark.slow
def test_command_line_through_exec(c_example_build, tmp_path):
    """End to end: the server passes (exit 0), the twin fails overflow (exit 1), a bad
    declaration is one line on stderr and exit 2."""
    exe = [sys.executable, "-m", "fftgauge", "check", "--dtypes", "q15", "--kinds", "fft", "--sizes", "64", "--quiet"]
    server = c_example_build / "radix2_q15_server"
    good = subprocess.run(exe + ["--backend", f"exec:{server}[output_shift=log2n]"], cwd=ROOT,
                          capture_output=True, text=True)
    assert good.returncode == 0, good.stdout + good.stderr
    bad = subprocess.run(exe + ["--backend", f"exec:{server}_broken[output_shift=log2n]", "--json",
                                str(tmp_path / "b.json")], cwd=ROOT, capture_output=True, text=True)
    assert bad.returncode == 1, bad.stdout + bad.stderr
    rows = {r["check"]: r for r in json.loads((tmp_path / "b.json").read_text())["rows"]}
    assert (rows["overflow"]["status"], rows["overflow"]["diagnosis"]) == ("fail", "overflow")
    wrong = subprocess.run(exe + ["--backend", f"exec:{server}[output_shift=block]"], cwd=ROOT,
                           capture_output=True, text=True)
    assert wrong.returncode == 2 and "Traceback" not in wrong.stderr
    assert len(wrong.stderr.strip().splitlines()) == 1 and "output_shift" in wrong.stderr


# -- the C example's Q31 server ---------------------------------------------------------------

def test_q31_server_matches_the_reference_bit_for_bit(c_example_build):
    """Through the protocol (precision code 0x84, int32 pairs), one request per transform and
    one batch: equal to the built-in radix-2 in q31 (1/2 per stage, round half up,
    saturation) at N = 1..4096; the hello claims fft in q31 only."""
    backend = q31_server(c_example_build)
    try:
        caps = backend.capabilities()
        assert caps.dtypes == ("q31",) and caps.kinds == ("fft",)
        rng = np.random.default_rng(4)
        for t in range(13):
            n = 1 << t
            x = quantise((rng.uniform(-1, 1, n) + 1j * rng.uniform(-1, 1, n)) * 0.7, Q31)
            plan = backend.plan(Case("fft", "q31", n))
            got = plan.execute(x)
            assert got.shape == (n, 2) and got.dtype == np.int32
            assert np.array_equal(got, FixedRadix2(Q31, "stage", "round-half-up").transform(x).pairs), n
            both = plan.execute_batch(np.stack([x, x[::-1]]))
            assert both.shape == (2, n, 2) and np.array_equal(both[0], got)
    finally:
        backend.close()


def test_q31_server_refuses_other_precision_codes_on_the_wire(c_example_build):
    """Raw requests to the program (docs/external-backends.md's layout): a q31 request (0x84)
    of an impulse is answered ok with the impulse's flat spectrum over N (output shift log2 N,
    the DFT of a unit impulse being all ones); the same request coded q15 (0x82) or float64
    (8) is answered status 1 (unsupported), and the server stays in step for the next one."""
    from fftgauge.backends.pipe_protocol import RESPONSE_HEADER, encode_hello

    n = 8
    x = np.zeros((n, 2), dtype=np.int32)
    x[0, 0] = 1 << 30                           # 0.5 in Q31
    payload = x.tobytes()                       # little-endian host, as the example assumes
    proc = subprocess.Popen([str(c_example_build / "radix2_q31_server")], stdin=subprocess.PIPE, stdout=subprocess.PIPE)

    def ask(request: bytes) -> tuple[int, bytes]:
        proc.stdin.write(request)
        proc.stdin.flush()
        head = RESPONSE_HEADER.unpack(proc.stdout.read(RESPONSE_HEADER.size))
        return head[2], proc.stdout.read(head[6])

    try:
        status, _ = ask(encode_hello())
        assert status == 0
        for dtype in ("q15", "float64"):
            request = bytearray(encode_transform(Case("fft", "q31", n), 1, len(payload)))
            request[9] = {"q15": 0x82, "float64": 8}[dtype]
            status, message = ask(bytes(request) + payload)
            assert status == 1 and b"q31" in message, (dtype, message)
        status, body = ask(encode_transform(Case("fft", "q31", n), 1, len(payload)) + payload)
        assert status == 0
        y = np.frombuffer(body, dtype=np.int32).reshape(n, 2)
        # 0.5 / 8 = 2^27 in every bin's real part, 0 imaginary: exact (each halving is of an even number)
        assert np.array_equal(y[:, 0], np.full(n, 1 << 27)) and not y[:, 1].any()
    finally:
        proc.stdin.close()
        proc.wait(timeout=30)


def test_q31_server_passes_and_its_twin_without_saturation_fails(c_example_build):
    """The Q31 server passes every fixed-point check; the -DMISSING_SATURATION twin fails
    overflow with diagnosis overflow (sums wrap around), N = 16 and 1024."""
    good, bad = q31_server(c_example_build), q31_server(c_example_build, "radix2_q31_server_broken")
    try:
        for n in (16, 1024):
            rows = {r.check: r for r in fixed_check_case(good, Case("fft", "q31", n), 5)}
            assert {r.status for r in rows.values() if r.check != "round-trip"} == {"pass"}, [r.message for r in rows.values()]
            broken = {r.check: r for r in fixed_check_case(bad, Case("fft", "q31", n), 5)}
            assert (broken["overflow"].status, broken["overflow"].diagnosis) == ("fail", "overflow"), n
            assert "sums wrap around inside" in broken["overflow"].message
    finally:
        good.close()
        bad.close()
