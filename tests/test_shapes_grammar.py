"""The --shapes grammar, the named shape sets, the shaped cases a request names, the memory estimate.

Sources: the grammar and the sets are our own (docs/reference.md, "Shaped cases (issue 14)");
the kinds' families and the halved axis follow the array API standard's fft extension
(fftn/rfftn halve the last axis listed), checked against numpy.fft's output shapes.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from fftgauge.harness.errors import UsageError
from fftgauge.harness.sizes import is_prime
from fftgauge.harness.shapes.case import ShapeCase
from fftgauge.harness.shapes.grammar import NAMED_SHAPE_SETS, ShapeSpec, parse_shapes, shape_cases
from fftgauge.harness.shapes.memory import case_bytes, check_memory, format_bytes


def test_every_item_form():
    assert parse_shapes("64x64") == [ShapeSpec((64, 64), (0, 1))]
    assert parse_shapes("12x12x12") == [ShapeSpec((12, 12, 12), (0, 1, 2))]
    assert parse_shapes("12^3") == [ShapeSpec((12, 12, 12), (0, 1, 2))]
    assert parse_shapes("1024") == [ShapeSpec((1024,), (0,))]
    assert parse_shapes("1000x256 along -1") == [ShapeSpec((1000, 256), (-1,))]
    assert parse_shapes("256x1000 along 0") == [ShapeSpec((256, 1000), (0,))]
    assert parse_shapes("32x32x32 over 1+2") == [ShapeSpec((32, 32, 32), (1, 2))]
    assert parse_shapes("32x32x32 over 2+0") == [ShapeSpec((32, 32, 32), (2, 0))]
    assert parse_shapes("32x32x32 over -1") == [ShapeSpec((32, 32, 32), (-1,))]
    # Spaces are free around items and between words; repeats are dropped, order kept.
    assert parse_shapes(" 8x8 ,  4x6   along  1, 8x8") == [ShapeSpec((8, 8), (0, 1)), ShapeSpec((4, 6), (1,))]


def test_labels_read_back_as_the_same_spec():
    for spec in parse_shapes("@deep"):
        assert parse_shapes(spec.label()) == [spec]


@pytest.mark.parametrize("bad", ["0x4", "4x-1", "-3", "4x4 along 2", "4x4 along -3", "4x4 over 0+0",
                                 "4x4 over 1+-1", "4x4x4 over 0+1+0", "abc", "4x4 along", "4x4 along 0+1",
                                 "4x4 over 0,1", "4x4 sideways 1", "4xx4", "4x4.5", "1.5", "@nope", "4^0",
                                 "4^9", "2^31", "4x4 over a", "", " ", "4,,4"])
def test_bad_items_are_usage_errors_naming_the_item(bad):
    with pytest.raises(UsageError) as info:
        parse_shapes(bad)
    msg = str(info.value)
    assert "\n" not in msg
    item = " ".join(bad.split())
    if item and "," not in item:
        assert repr(item) in msg


def test_default_set_covers_what_the_issue_asks():
    specs = parse_shapes("@default")
    two_d = [s for s in specs if len(s.shape) == 2 and len(s.axes) == 2]
    assert any(s.shape[0] == s.shape[1] and s.shape[0] & (s.shape[0] - 1) == 0 for s in two_d)  # square pow2
    assert any(s.shape[0] != s.shape[1] for s in two_d)  # non-square
    assert any(all(n % 2 and not is_prime(n) for n in s.shape) for s in two_d)  # odd composite
    assert any(all(is_prime(n) for n in s.shape) for s in two_d)  # prime
    assert ShapeSpec((100, 64), (0, 1)) in specs and ShapeSpec((12, 12, 12), (0, 1, 2)) in specs
    assert sum(1 for s in specs if len(s.shape) == 3 and len(s.axes) == 3) >= 4
    batches = [s for s in specs if len(s.axes) == 1]
    assert any(s.axes[0] % len(s.shape) == 0 for s in batches)
    assert any(s.axes[0] % len(s.shape) == len(s.shape) - 1 for s in batches)
    assert any(len(s.shape) == 3 and s.axes[0] % 3 == 1 for s in batches)  # a middle axis
    assert any(list(s.axes) != sorted(s.axes) for s in specs)  # a permuted axis order
    # Sized for 60 s on two cores: no array above 256x256 points.
    assert max(math.prod(s.shape) for s in specs) <= 256 * 256


def test_deep_set_holds_the_large_shapes():
    specs = set(parse_shapes("@deep"))
    assert set(parse_shapes("@default")) <= specs
    assert ShapeSpec((4096, 4096), (0, 1)) in specs and ShapeSpec((256, 256, 256), (0, 1, 2)) in specs
    assert max(math.prod(s.shape) for s in specs if len(s.axes) == 1) >= 2**24  # a big batch
    assert set(NAMED_SHAPE_SETS) == {"default", "deep"}


def test_shape_cases_take_each_kind_in_its_family_form():
    specs = parse_shapes("8x6, 10x4 along 0")
    cases = shape_cases(specs, ["fft", "rfftn", "fftn"], ["float64"])
    kinds = [(c.kind, c.shape, c.axes) for c in cases]
    assert kinds == [("fftn", (8, 6), (0, 1)), ("rfftn", (8, 6), (0, 1)),
                     ("fft", (10, 4), (0,)), ("rfft", (10, 4), (0,))]
    many = shape_cases(specs, ["ifft", "irfft"], ["float32", "float64"], layouts=("C", "F", "strided", "reversed"),
                       norms=("backward", "ortho"))
    assert len(many) == 2 * 2 * 2 * 4 * 2 and len(set(many)) == len(many)
    assert all(isinstance(c, ShapeCase) for c in many)


def test_the_halved_axis_matches_numpy():
    """The array API standard's rfftn halves the last axis listed; numpy.fft agrees."""
    for spec in parse_shapes("6x5x4 over 2+0, 6x5x4 over 0+1, 6x5x4, 7x9 along 0"):
        (case,) = shape_cases([spec], ["rfft"], ["float64"])
        x = np.zeros(spec.shape)
        y = (np.fft.rfftn(x, s=case.lengths, axes=case.axes) if len(spec.axes) > 1
             else np.fft.rfft(x, axis=case.axes[0]))
        assert y.shape == case.output_shape, spec.label()


@pytest.mark.parametrize("what", [dict(kinds=["fftx"]), dict(dtypes=["float16"]), dict(layouts=["G"]),
                                  dict(norms=["unitary"])])
def test_shape_cases_refuse_unknown_names(what):
    args = dict(kinds=["fft"], dtypes=["float64"], layouts=("C",), norms=("backward",)) | what
    with pytest.raises(UsageError) as info:
        shape_cases(parse_shapes("4x4"), args["kinds"], args["dtypes"], args["layouts"], args["norms"])
    assert "\n" not in str(info.value) and repr(next(iter(what.values()))[0]) in str(info.value)


def test_memory_estimate_and_refusal():
    case = ShapeCase("fftn", "float64", (1024, 1024, 1024), (0, 1, 2))
    points = 1024**3
    ld = np.dtype(np.clongdouble).itemsize
    # Input, output (16 bytes each), reference hi + lo (32), the clongdouble working array, 4 copies.
    assert case_bytes(case) == points * (16 + 16 + 32 + ld + 4 * 16)
    with pytest.raises(UsageError) as info:
        check_memory([ShapeCase("fft", "float64", (8,), (0,)), case], available_bytes=23 * 2**30)
    msg = str(info.value)
    assert "\n" not in msg and "1024x1024x1024" in msg and "23 GiB" in msg
    assert format_bytes(case_bytes(case)) in msg
    check_memory([ShapeCase("rfftn", "float32", (64, 64), (0, 1))], available_bytes=2**30)  # fits: no error
    check_memory([])
    # The real kinds' halved axis: rfftn output is 64 x 33 complex.
    small = ShapeCase("rfftn", "float32", (64, 64), (0, 1))
    assert case_bytes(small, copies=0) == 64 * 64 * 4 + 64 * 33 * 8 + 2 * 64 * 33 * 16 + 64 * 64 * ld
    assert format_bytes(96 * 2**30) == "96 GiB" and format_bytes(512 * 2**20) == "512 MiB"
    assert format_bytes(100) == "100 bytes"
