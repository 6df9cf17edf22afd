"""Timing over shapes: the shaped case's job fields, its row and rates on a fake clock, the layout
the plan sees, the ``fftgauge time --shapes`` command, its table and its plot.

Sources: the rate convention 5 N log2 N (2.5 N log2 N real) is common practice in FFT
benchmarking (the contract's ``flops``); N log2 N = sum over axes of (N / n_a) n_a log2 n_a is
the separable evaluation's own count (log2 of a product is the sum of the log2s), checked here
numerically on 64x64 and 8x16x32.
"""

from __future__ import annotations

import json
import math
import subprocess
import sys

import numpy as np
import pytest

from fake_clock import FakeClock, cost_schedule
from fftgauge.backends.base import Backend, Capabilities, Plan
from fftgauge.backends.numpy_fft import NumpyBackend
from fftgauge.harness.cases import DTYPES
from fftgauge.harness.shapes.case import SHAPE_KINDS, ShapeCase
from fftgauge.harness.shapes.fields import case_fields, case_from_fields, row_order_key, shape_text
from fftgauge.harness.shapes.timed import LaidOutPlan, shaped_input
from fftgauge.harness.timing.case_job import time_case
from fftgauge.harness.timing.opcount import pseudo_flops, shaped_pseudo_flops

EXACT = dict(samples=9, min_samples=5, budget_seconds=None, warmup_seconds=0.0, measure_memory=False)


class FakeShapedPlan(Plan):
    """Advances the fake clock by a fixed cost per call; records the strides and flags of what it got."""

    def __init__(self, case, clock, cost_ns):
        super().__init__(case)
        self.clock, self.cost = clock, cost_schedule(cost_ns)
        self.calls = 0
        self.seen: list[tuple] = []

    def prepare(self, x):
        return x  # keeps the layout, as ShapedFunctionPlan does

    def execute(self, x):
        self.clock.advance(self.cost(self.calls))
        self.calls += 1
        self.seen.append((x.shape, x.strides, x.flags["C_CONTIGUOUS"], x.flags["F_CONTIGUOUS"]))
        return x


class FakeShapedBackend(Backend):
    name = "fake-shaped"

    def __init__(self, clock, cost_ns, plan_ns=0):
        super().__init__()
        self.clock, self.cost_ns, self.plan_ns = clock, cost_ns, plan_ns
        self.plans: list[FakeShapedPlan] = []

    @property
    def version(self):
        return "1"

    def capabilities(self):
        return Capabilities(dtypes=DTYPES, shaped_kinds=SHAPE_KINDS)

    def plan(self, case):
        raise AssertionError("a shaped case must be planned with plan_shaped")

    def plan_shaped(self, case):
        self.clock.advance(self.plan_ns)
        plan = FakeShapedPlan(case, self.clock, self.cost_ns)
        self.plans.append(plan)
        return plan


def fake_shaped_row(case: ShapeCase, cost_ns: int, plan_ns: int = 0):
    clock = FakeClock()
    backend = FakeShapedBackend(clock, cost_ns, plan_ns)
    return time_case(backend, case_fields(case), dict(EXACT), clock), backend


# -- fields and the rate formula -------------------------------------------------------------------

def test_case_fields_round_trip_and_tell_shaped_from_one_dimensional():
    case = ShapeCase("rfftn", "float32", (12, 10, 8), (2, 0), "F", "ortho")
    fields = case_fields(case)
    assert fields == ("rfftn", "float32", (12, 10, 8), (2, 0), "F", "ortho")
    assert case_from_fields(fields) == case
    assert case_from_fields(("fft", "float64", 64, "backward")).n == 64


def test_shaped_flops_are_the_one_dimensional_convention_times_the_batch():
    """64x64 fftn: N = 4096, log2 N = 12, 5 * 4096 * 12 = 245760 (by hand); the same as the
    separable count, 64 row transforms and 64 column transforms of 5 * 64 * 6 each."""
    assert shaped_pseudo_flops(4096, 1, False) == 245760
    assert shaped_pseudo_flops(4096, 1, False) == pytest.approx(2 * 64 * pseudo_flops(64, False))
    # 8x16x32: N log2 N = 4096 * 12 against sum over axes (4096 / n) n log2 n = 4096 * (3 + 4 + 5)
    assert shaped_pseudo_flops(4096, 1, True) == pytest.approx(2.5 * 4096 * (3 + 4 + 5))
    # a batch of 1000 fft of 64 along the last axis: 1000 * 5 * 64 * 6 = 1,920,000 (by hand)
    assert shaped_pseudo_flops(64, 1000, False) == 1_920_000


def test_row_of_a_batch_carries_the_shape_fields_and_counts_every_transform():
    """1000x64 along -1 at 2 ms a call (fake clock): flops 1,920,000 (by hand, above),
    1.92e6 / 2e-3 / 1e9 = 0.96 GFLOP/s; ns per N log2 N per transform: 2e6 / 1000 / 384 ns."""
    case = ShapeCase("fft", "float64", (1000, 64), (-1,))
    row, _ = fake_shaped_row(case, 2_000_000, plan_ns=3_000)
    assert row["shape"] == [1000, 64] and row["axes"] == [-1] and row["layout"] == "C"
    assert row["batch"] == 1000 and row["points"] == 64 and row["n"] == 64
    assert row["seconds"] == pytest.approx(2e-3, rel=1e-12)
    assert row["flops"] == 1_920_000
    assert row["gflops"] == pytest.approx(0.96, rel=1e-12)
    assert row["ns_per_nlogn"] == pytest.approx(2e6 / 1000 / 384, rel=1e-12)
    assert row["plan_seconds"] == pytest.approx(3e-6, rel=1e-12)
    json.dumps(row)  # JSON-able as it is


@pytest.mark.parametrize("layout, check", [
    ("C", lambda s: s[2] and not s[3]),
    ("F", lambda s: s[3] and not s[2]),
    ("strided", lambda s: not s[2] and not s[3] and s[1] == (2 * 2 * 16 * 16, 2 * 16)),
    ("reversed", lambda s: all(v < 0 for v in s[1])),
])
def test_the_plan_is_timed_on_the_layout_the_case_names(layout, check):
    """complex128 of 8x16: C strides (256, 16); strided: every second element of a 16x32 buffer,
    strides (2 * 32 * 16, 2 * 16) bytes = (1024, 32)."""
    case = ShapeCase("fftn", "float64", (8, 16), (0, 1), layout)
    _, backend = fake_shaped_row(case, 2_000_000)
    seen = set(backend.plans[0].seen)
    assert len(seen) == 1 and all(s[0] == (8, 16) for s in seen)
    assert check(seen.pop())


def test_laid_out_plan_keeps_values_and_the_wrapped_execute():
    case = ShapeCase("fft", "float64", (6, 5), (0,), "reversed")
    plan = NumpyBackend().plan_shaped(case)
    wrapped = LaidOutPlan(plan)
    x = shaped_input(case, 7)
    prepared = wrapped.prepare(x)
    assert np.array_equal(prepared, x) and any(s < 0 for s in prepared.strides)
    assert wrapped.execute == plan.execute
    # numpy.fft along axis 0 is the reference here (a trusted library, not the code under test)
    np.testing.assert_allclose(wrapped.execute(prepared), np.fft.fft(x, axis=0), rtol=0, atol=1e-12)


def test_shaped_input_is_seeded_and_of_the_input_shape_and_dtype():
    case = ShapeCase("irfftn", "float32", (8, 6), (0, 1))
    a, b = shaped_input(case, 3), shaped_input(case, 3)
    assert a.shape == (8, 4) and a.dtype == np.complex64 and np.array_equal(a, b)
    assert not np.array_equal(a, shaped_input(case, 4))
    real = shaped_input(ShapeCase("rfft", "float64", (4, 10), (1,)), 3)
    assert real.dtype == np.float64 and real.shape == (4, 10)


def test_time_case_skips_what_the_backend_does_not_claim():
    from fftgauge.harness.errors import UnsupportedCase

    class OneD(FakeShapedBackend):
        def capabilities(self):
            return Capabilities(dtypes=DTYPES)

    with pytest.raises(UnsupportedCase, match="1-D array only"):
        time_case(OneD(FakeClock(), 10), case_fields(ShapeCase("fftn", "float64", (4, 4), (0, 1))), dict(EXACT))


# -- tables, order and the plot -----------------------------------------------------------------

def _row(backend, shape, axes, layout, seconds, kind="fftn"):
    return {"backend": backend, "kind": kind, "dtype": "float64", "n": math.prod(shape[a] for a in axes),
            "norm": "backward", "status": "ok", "seconds": seconds, "seconds_low": seconds * 0.9,
            "seconds_high": seconds * 1.1, "gflops": 1.5, "plan_seconds": 0.0, "shape": list(shape),
            "axes": list(axes), "layout": layout, "batch": 1, "points": math.prod(shape[a] for a in axes)}


def test_shape_text_and_order():
    assert shape_text(_row("a", (256, 256), (0, 1), "C", 1e-3)) == "256x256 axes=0,1 C"
    assert shape_text({"kind": "fft", "n": 8}) == ""
    rows = [_row("a", (64, 64), (0, 1), "F", 1.0), _row("a", (16, 16), (0, 1), "C", 1.0),
            {"kind": "fft", "dtype": "float64", "norm": "backward", "n": 8}]
    ordered = sorted(rows, key=row_order_key)
    assert ordered[0]["kind"] == "fft" and ordered[1]["shape"] == [16, 16]


def test_shaped_table_marks_the_fastest_per_line():
    from fftgauge.harness.report.shape_tables import format_shaped, markdown_shaped

    rows = [_row("slow", (64, 64), (0, 1), "C", 2e-4), _row("quick", (64, 64), (0, 1), "C", 1e-4),
            _row("slow", (64, 64), (0, 1), "F", 3e-4), {**_row("quick", (64, 64), (0, 1), "F", 0),
                                                         "status": "skip", "seconds": None}]
    text = format_shaped(rows)
    assert "64x64 axes=0,1 C" in text and "100 us*" in text and "skip" in text
    assert "**100 µs**" in markdown_shaped(rows)


def test_shaped_plot_has_one_line_per_backend_and_series(tmp_path):
    pytest.importorskip("matplotlib")
    from fftgauge.harness.report.shape_plots import draw_shaped_time, plot_shaped_time, series_name

    rows = [_row("a", (16, 16), (0, 1), "C", 1e-5), _row("a", (64, 64), (0, 1), "C", 1e-4),
            _row("a", (64, 64), (0, 1), "F", 2e-4),
            _row("a", (1000, 64), (-1,), "C", 1e-3, kind="fft"), _row("a", (64, 1000), (0,), "C", 2e-3, kind="fft")]
    assert series_name(rows[3]) == "C, last axis" and series_name(rows[4]) == "C, first axis"
    fig = draw_shaped_time(rows)
    gids = sorted(line.get_gid() for ax in fig.axes for line in ax.get_lines())
    assert gids == ["series:a|C, 2-D", "series:a|C, first axis", "series:a|C, last axis", "series:a|F, 2-D"]
    assert plot_shaped_time(rows, str(tmp_path / "p.png")).endswith("p.png")


# -- the command ---------------------------------------------------------------------------------

def _fftgauge(*args, cwd=None):
    return subprocess.run([sys.executable, "-m", "fftgauge", *args], capture_output=True, text=True, timeout=240,
                          cwd=cwd)


@pytest.mark.parametrize("args, words", [
    (["--shapes", "0x4"], "positive"),
    (["--shapes", "4x4 along 2"], "4x4 along 2"),
    (["--layouts", "F"], "--layouts goes with --shapes"),
    (["--shapes", "4x4", "--sizes", "16"], "--sizes"),
    (["--shapes", "4x4", "--layouts", "diagonal"], "diagonal"),
])
def test_bad_shaped_requests_exit_2_with_one_line(args, words, tmp_path):
    out = _fftgauge("time", "--backend", "numpy", "--json", str(tmp_path / "t.json"), *args)
    assert out.returncode == 2, out.stderr
    lines = out.stderr.strip().splitlines()
    assert len(lines) == 1 and words in lines[0] and "Traceback" not in out.stderr


def test_time_shapes_end_to_end(tmp_path):
    """numpy in its worker on two shapes and two layouts: every row timed, with its shape fields."""
    path = tmp_path / "t.json"
    out = _fftgauge("time", "--backend", "numpy", "--shapes", "16x16,100x8 along 0", "--kinds", "fft,rfft",
                    "--layouts", "C,F", "--samples", "5", "--rounds", "1", "--no-memory", "--quiet",
                    "--json", str(path), "--plot", str(tmp_path / "t.png"))
    assert out.returncode == 0, out.stderr
    doc = json.loads(path.read_text())
    assert {(r["kind"], tuple(r["shape"]), r["layout"]) for r in doc["rows"]} == {
        (k, s, lay) for k, s in (("fftn", (16, 16)), ("rfftn", (16, 16)), ("fft", (100, 8)), ("rfft", (100, 8)))
        for lay in ("C", "F")}
    assert all(r["status"] == "ok" and r["seconds"] > 0 for r in doc["rows"])
    batch = next(r for r in doc["rows"] if r["kind"] == "fft")
    assert batch["batch"] == 8 and batch["points"] == 100 and batch["flops"] == pytest.approx(8 * 5 * 100 * math.log2(100))
    assert "16x16 axes=0,1 C" in out.stdout and doc["request"]["shapes"]
    assert (tmp_path / "t.png").stat().st_size > 0
    # fftgauge report on the shaped file: the shaped table and plot, no 1-D scaling fit over N
    report = _fftgauge("report", str(path), "--out", str(tmp_path / "rep"), "--markdown", str(tmp_path / "r.md"))
    assert report.returncode == 0, report.stderr
    page = (tmp_path / "r.md").read_text()
    assert "| 100x8 axes=0 F | 8 | 100 |" in page and "time-per-call-shaped.png" in page
    assert "shaped cases only: no scaling fit" in page


def test_self_timed_columns_are_marked_and_not_the_fastest_beside_harness_times():
    from fftgauge.harness.report.shape_tables import shaped_blocks

    rows = [_row("host", (64, 64), (0, 1), "C", 2e-4), {**_row("board", (64, 64), (0, 1), "C", 1e-5),
                                                        "timing_source": "program"}]
    block = shaped_blocks(rows)[0]
    assert block["header"][3:5] == ["host", "board (self-timed)"]
    assert block["fastest"] == [None]  # one fftgauge-timed column: nothing to compare it with
    alone = shaped_blocks([rows[1], {**rows[1], "backend": "board2", "seconds": 2e-5}])[0]
    assert alone["fastest"] == [3]  # only self-timed columns: the fastest of those
