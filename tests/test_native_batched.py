"""Batched and N-D transforms in native code: the ``clib:`` many shape (strides passed to C) and
the ``exec:`` pipe protocol version 2 (shaped requests), both on the C example
(examples/c_radix2: radix2_many.c, radix2_shaped_server.c), against numpy.fft.

Source of the expected values: numpy.fft (pocketfft), the reference implementation the
contract's conventions are numpy's; the example is radix-2, so agreement to a few epsilon
(a relative max error below 1e-12 in float64, 1e-5 in float32) is expected. The leaking
twin (-DLEAKING_BATCH) shows the comparison can fail: its first transform agrees, the others
do not. The version-1 server (radix2_server) stands for an old program.
"""

from __future__ import annotations

import json
import struct
import subprocess
import sys

import numpy as np
import pytest

from fftgauge.backends.pipe_protocol import (HELLO_RECORD, REQUEST_HEADER, SHAPE_ITEM, Hello, ProtocolError,
                                             decode_hello, decode_response_header, encode_shaped_transform)
from fftgauge.backends.program_shaped import shaped_kinds_of, shaped_reason
from fftgauge.backends.registry import load_backend
from fftgauge.harness.cases import Case
from fftgauge.harness.errors import UsageError
from fftgauge.harness.shapes.case import ShapeCase, lay_out
from fftgauge.harness.shapes.timed import shaped_input

#: (shape, axes): batches along the last, first and a middle axis; 2-D; 3-D over permuted axes.
SHAPES = [((6, 16), (1,)), ((16, 6), (0,)), ((3, 8, 5), (1,)), ((8, 16), (0, 1)), ((4, 8, 16), (2, 0)),
          ((4, 8, 2), (0, 1))]
LAYOUTS = ("C", "F", "strided", "reversed")


def numpy_reference(case: ShapeCase, x: np.ndarray) -> np.ndarray:
    """numpy.fft's answer for ``case`` on ``x`` (in double precision)."""
    fn = getattr(np.fft, case.kind)
    x = x.astype(np.complex128 if case.base_kind != "rfft" else np.float64)
    if len(case.axes) == 1:
        return fn(x, n=case.lengths[0], axis=case.axes[0])
    return fn(x, s=case.lengths, axes=case.axes)


def relative_error(y: np.ndarray, ref: np.ndarray) -> float:
    return float(np.max(np.abs(y - ref)) / np.max(np.abs(ref)))


def cases_of(kinds, dtype="float64"):
    for kind in kinds:
        for shape, axes in SHAPES:
            if (len(axes) == 1) == (kind in ("fft", "ifft", "rfft", "irfft")):
                for layout in LAYOUTS:
                    yield ShapeCase(kind, dtype, shape, axes, layout)


def many_spec(build, family: str, library: str = "libradix2_many.so", **opts) -> str:
    symbol = "radix2_many" if family == "complex" else "radix2_real_many"
    if opts.get("dtype") == "float32":
        symbol = symbol.replace("radix2_", "radix2f_")
    kinds = "fft+ifft" if family == "complex" else "rfft+irfft"
    extra = "".join(f",{k}={v}" for k, v in opts.items())
    return f"clib:{build / library}:{symbol}[shape=many,kind={kinds},sizes=pow2{extra}]"


# -- clib: the many shape ------------------------------------------------------------------------

@pytest.mark.parametrize("family, kinds", [("complex", ("fft", "ifft", "fftn", "ifftn")),
                                           ("real", ("rfft", "irfft", "rfftn", "irfftn"))])
@pytest.mark.parametrize("dtype", ["float64", "float32"])
def test_many_shape_matches_numpy_in_every_layout(c_example_build, family, kinds, dtype):
    backend = load_backend(many_spec(c_example_build, family, dtype=dtype))
    assert set(backend.capabilities().shaped_kinds) == set(kinds)
    tolerance = 1e-12 if dtype == "float64" else 1e-5
    for case in cases_of(kinds, dtype):
        assert backend.shaped_unsupported_reason(case) is None, case.label()
        x = shaped_input(case, 5)
        plan = backend.plan_shaped(case)
        y = plan.execute(plan.prepare(lay_out(x, case.layout)))
        ref = numpy_reference(case, x)
        assert y.shape == ref.shape and y.dtype == case.output_dtype, case.label()
        assert relative_error(y, ref) < tolerance, case.label()


def test_many_shape_passes_strides_and_copies_only_unpacked_axes(c_example_build):
    """Batches in any layout and N-D over trailing C-order (or reversed) axes reach the C code as
    strides; N-D over Fortran-order, strided or permuted axes is copied once (counted)."""
    backend = load_backend(many_spec(c_example_build, "complex"))
    expected = {((6, 16), (1,), "F"): 0, ((16, 6), (0,), "strided"): 0, ((3, 8, 5), (1,), "reversed"): 0,
                ((8, 16), (0, 1), "C"): 0, ((8, 16), (0, 1), "reversed"): 0, ((8, 16), (0, 1), "F"): 1,
                ((8, 16), (0, 1), "strided"): 1, ((4, 8, 16), (2, 0), "C"): 1}
    for (shape, axes, layout), copies in expected.items():
        case = ShapeCase("fft" if len(axes) == 1 else "fftn", "float64", shape, axes, layout)
        plan = backend.plan_shaped(case)
        plan.execute(plan.prepare(lay_out(shaped_input(case, 1), layout)))
        assert plan.copies == copies, case.label()


def test_many_shape_serves_one_dimensional_cases(c_example_build):
    backend = load_backend(many_spec(c_example_build, "real"))
    for kind in ("rfft", "irfft"):
        case = Case(kind, "float64", 64)
        x = np.random.default_rng(2).standard_normal(case.input_length)
        x = x if kind == "rfft" else x + 1j * np.random.default_rng(3).standard_normal(case.input_length)
        plan = backend.plan(case)
        y = plan.execute(plan.prepare(x))
        ref = np.fft.rfft(x) if kind == "rfft" else np.fft.irfft(x, n=64)
        assert y.shape == ref.shape and relative_error(y, ref) < 1e-12


def test_leaking_twin_is_right_on_the_first_transform_only(c_example_build):
    backend = load_backend(many_spec(c_example_build, "complex", library="libradix2_many_leaking.so"))
    case = ShapeCase("fft", "float64", (5, 32), (-1,))
    x = shaped_input(case, 9)
    plan = backend.plan_shaped(case)
    y, ref = plan.execute(plan.prepare(x)), numpy_reference(case, x)
    assert relative_error(y[:1], ref[:1]) < 1e-12
    assert relative_error(y[1:], ref[1:]) > 1e-4


@pytest.mark.parametrize("options, words", [("dtype=q15", "shape=many takes float32"),
                                            ("noop=radix2_noop", "noop= does not go with shape=many")])
def test_many_shape_refuses_what_it_cannot_call(c_example_build, options, words):
    spec = f"clib:{c_example_build / 'libradix2_many.so'}:radix2_many[shape=many,{options}]"
    with pytest.raises(UsageError, match=words):
        load_backend(spec)


# -- exec: protocol version 2 --------------------------------------------------------------------

def test_codec_of_a_shaped_request_and_of_both_hello_versions():
    case = ShapeCase("rfftn", "float32", (12, 10, 8), (2, -3), "F")
    data = encode_shaped_transform(case, 1000)
    magic, version, op, kind, precision, norm, rank, count, n, payload = REQUEST_HEADER.unpack(data[:32])
    assert (magic, version, op, kind, precision, norm, rank, count, n) == (b"FGRQ", 2, 3, 2, 4, 0, 3, 2, 0)
    block = [SHAPE_ITEM.unpack(data[32 + 8 * i: 40 + 8 * i])[0] for i in range(5)]
    assert block == [12, 10, 8, 2, 0] and payload == 40 + 1000 and len(data) == 72
    # a version-1 hello record (reserved field zero): version 1, nothing shaped
    old = decode_hello(struct.pack("<BBBBIQ", 0x0f, 0x03, 0x01, 0x01, 0, 1 << 20) + b"old 1.0")
    assert old.version == 1 and old.shaped_kinds == () and old.max_rank == 0
    new = decode_hello(HELLO_RECORD.pack(0x0f, 0x02, 0x01, 0x00, 2, 0x05, 1, 0) + b"new 2.0")
    assert new.version == 2 and new.shaped_kinds == ("fft", "rfft") and new.max_rank == 1
    assert shaped_kinds_of(new) == ("fft", "rfft")  # batches only: no fftn at rank 1
    assert "at most 1 axes" in shaped_reason(new, ShapeCase("fftn", "float64", (4, 4), (0, 1)))


def test_an_answer_in_another_version_than_the_request_is_refused():
    from fftgauge.backends.pipe_protocol import RESPONSE_HEADER

    header = RESPONSE_HEADER.pack(b"FGRS", 1, 0, 0, 0, 0, 16)
    with pytest.raises(ProtocolError, match="fftgauge speaks version 2"):
        decode_response_header(header, "a shaped request", 16, 2)
    assert decode_response_header(header, "a 1-D request", 16)[2] == 16


def test_version_two_server_matches_numpy(c_example_build):
    backend = load_backend(f"exec:{c_example_build / 'radix2_shaped_server'}")
    try:
        assert backend.hello.version == 2 and backend.details()["protocol_version"] == 2
        assert set(backend.capabilities().shaped_kinds) == {"fft", "ifft", "rfft", "irfft", "fftn", "ifftn",
                                                           "rfftn", "irfftn"}
        for dtype, tolerance in (("float64", 1e-12), ("float32", 1e-5)):
            for case in cases_of(("fft", "irfft", "fftn", "rfftn", "irfftn"), dtype):
                x = shaped_input(case, 4)
                plan = backend.plan_shaped(case)
                y = plan.execute(plan.prepare(lay_out(x, case.layout)))
                ref = numpy_reference(case, x)
                assert y.shape == ref.shape and relative_error(y, ref) < tolerance, case.label()
                assert plan.last_self_seconds is not None and plan.last_self_seconds > 0
        # its 1-D requests are version 1, as every program's
        plan = backend.plan(Case("fft", "float64", 32))
        x = np.exp(2j * np.pi * 3 * np.arange(32) / 32)  # one tone: X[3] = 32, the rest 0 (the DFT's definition)
        y = plan.execute(plan.prepare(x))
        expected = np.zeros(32, complex)
        expected[3] = 32
        assert np.max(np.abs(y - expected)) < 1e-12
        assert "powers of two" in backend.shaped_unsupported_reason(ShapeCase("fft", "float64", (4, 12), (1,)))
    finally:
        backend.close()


def test_version_one_server_still_works_for_one_dimensional_cases(c_example_build):
    backend = load_backend(f"exec:{c_example_build / 'radix2_server'}")
    try:
        assert backend.hello.version == 1 and backend.capabilities().shaped_kinds == ()
        plan = backend.plan(Case("ifft", "float64", 16))
        x = np.random.default_rng(1).standard_normal(16) + 0j
        assert relative_error(plan.execute(plan.prepare(x)), np.fft.ifft(x)) < 1e-12
        reason = backend.shaped_unsupported_reason(ShapeCase("fft", "float64", (4, 16), (1,)))
        assert "1-D array only" in reason
    finally:
        backend.close()


def test_time_shapes_on_both_native_backends(c_example_build, tmp_path):
    """fftgauge time --shapes on the many shape and the version-2 server, with the old server
    skipped: every claimed case timed, the program's own times marked."""
    path = tmp_path / "t.json"
    specs = [many_spec(c_example_build, "complex"), f"exec:{c_example_build / 'radix2_shaped_server'}",
             f"exec:{c_example_build / 'radix2_server'}"]
    args = [a for spec in specs for a in ("--backend", spec)]
    out = subprocess.run([sys.executable, "-m", "fftgauge", "time", *args, "--shapes", "16x16,64x8 along 0",
                          "--kinds", "fft", "--layouts", "C,F", "--samples", "5", "--rounds", "1", "--no-memory",
                          "--quiet", "--json", str(path)], capture_output=True, text=True, timeout=240)
    assert out.returncode == 0, out.stderr
    rows = json.loads(path.read_text())["rows"]
    by_backend: dict[str, list] = {}
    for r in rows:
        by_backend.setdefault(r["backend"], []).append(r)
    assert len(by_backend) == 3 and all(len(v) == 4 for v in by_backend.values())
    old = by_backend["exec:radix2_server"]
    assert all(r["status"] == "skip" for r in old)
    new = by_backend["exec:radix2_shaped_server"]
    assert all(r["status"] == "ok" and r["timing_source"] == "program" for r in new)
    many = next(v for k, v in by_backend.items() if k.startswith("clib:"))
    assert all(r["status"] == "ok" and r["seconds"] > 0 and r["shape"] for r in many)


def test_hello_dataclass_defaults_keep_old_constructions_working():
    hello = Hello(("fft",), ("float64",), ("backward",), True, False, None, "x")
    assert hello.version == 1 and hello.shaped_kinds == () and shaped_kinds_of(hello) == ()


def test_shaped_battery_passes_the_example_and_finds_the_leaking_twin(c_example_build, tmp_path):
    """fftgauge check --shapes (the shaped battery, its own ground truth) on the many shape, its
    leaking twin and the version-2 server: no failure but the twin's, diagnosed batch-leak."""
    good = many_spec(c_example_build, "complex")
    leaking = many_spec(c_example_build, "complex", library="libradix2_many_leaking.so", label="leaking")
    path = tmp_path / "c.json"
    out = subprocess.run([sys.executable, "-m", "fftgauge", "check", "--backend", good, "--backend", leaking,
                          "--backend", f"exec:{c_example_build / 'radix2_shaped_server'}", "--dtypes", "float64",
                          "--shapes", "8x16 along -1,16x8 along 0,16x16", "--layouts", "C,F", "--quiet",
                          "--json", str(path)], capture_output=True, text=True, timeout=300)
    assert out.returncode == 1, out.stderr  # the twin fails
    rows = [r for r in json.loads(path.read_text())["rows"] if r.get("shape")]
    failed = [r for r in rows if r["status"] == "fail"]
    assert failed and all(r["backend"] == "leaking" for r in failed)
    assert {r["diagnosis"] for r in failed if r["check"] == "batch-independence"} == {"batch-leak"}
    assert all(r["status"] in ("pass", "skip") for r in rows if r["backend"] != "leaking")
    assert sum(r["status"] == "pass" for r in rows if r["backend"].startswith("exec:")) > 0
