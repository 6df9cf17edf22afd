"""The gate over shapes: the request (A/B only), rows with the shape fields, a slowdown of one
layout found and the others not (fake sampler, fake clock), the worker jobs on a shaped case,
and the command's refusals (exit 2, one line)."""

from __future__ import annotations

import json
import subprocess
import sys

import numpy as np
import pytest

from fftgauge.backends.numpy_fft import NumpyBackend
from fftgauge.harness.errors import UsageError
from fftgauge.harness.gate.request import GateSettings, build_request
from fftgauge.harness.shapes.case import ShapeCase
from fftgauge.harness.shapes.fields import case_fields
from fftgauge.harness.shapes.options import shaped_gate_cases


def test_ab_request_holds_the_shaped_cases():
    req = build_request(old="numpy", new="numpy", shapes="64x64, 1000x64 along -1", kinds="fft", layouts="C,F")
    assert [c.label() for c in req.shape_cases] == [
        "fftn float64 64x64 axes=0,1 C", "fftn float64 64x64 axes=0,1 F",
        "fft float64 1000x64 axes=-1 C", "fft float64 1000x64 axes=-1 F"]
    assert build_request(old="numpy", new="numpy").shape_cases == ()


@pytest.mark.parametrize("kwargs, words", [
    (dict(mode="stored"), "stored mode re-measures the stored shaped cases"),
    (dict(accuracy=True), "--accuracy"),
    (dict(sizes="1024"), "--sizes"),
    (dict(shapes="4x0"), "positive"),
    (dict(shapes=None, layouts="F"), "--layouts goes with --shapes"),
])
def test_shaped_gate_refuses_what_it_cannot_do(kwargs, words):
    args = dict(shapes="8x8", layouts=None, kinds=None, dtypes=None, sizes=None, mode="ab", metric="time",
                accuracy=False, save=None)
    args.update(kwargs)
    with pytest.raises(UsageError, match=words.replace("-", r"\-")):
        shaped_gate_cases(**args)


class LayoutSampler:
    """Fake WorkerSampler: per-call seconds from a seeded lognormal (sigma 1%); the ``new`` side is
    ``slower`` times the old one on cases of layout ``slow_layout``; each block pair moves the clock."""

    def __init__(self, clock, slower=1.2, slow_layout="F", seed=5):
        self.clock, self.slower, self.slow_layout = clock, slower, slow_layout
        self.rng = np.random.default_rng(seed)
        self.yardstick_failure = None

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        return None

    def claims(self, key, cases):
        from types import SimpleNamespace

        return SimpleNamespace(label=key, reasons=(None,) * len(cases), record=lambda spec: {"spec": spec})

    def prepare(self, item):
        return {item.new_key: {"plan_seconds": 0.0, "loops": 1}}

    def _block(self, median):
        return list(median * np.exp(self.rng.normal(0.0, 0.01, 5)))

    def sample(self, item, pairs):
        from fftgauge.harness.gate.sampling import Draw

        draw = Draw()
        base = 1e-4
        factor = self.slower if item.case.layout == self.slow_layout else 1.0
        for _ in range(pairs):
            draw.old.extend(self._block(base))
            draw.new.extend(self._block(base * factor))
        draw.yardstick.extend(self._block(1e-3))
        self.clock.now += pairs * 0.01
        return draw

    def release(self, item):
        pass


class Clock:
    def __init__(self):
        self.now = 0.0

    def __call__(self):
        return self.now


def test_a_slowdown_of_one_layout_is_found_and_the_rows_carry_the_shape():
    """The new side 20% slower on the Fortran-order input only: the F rows are ``slower`` with a
    ratio near 1.2, the C rows ``same``; every row names its shape, axes, layout, batch and N."""
    from fftgauge.harness.gate.run import run_gate

    req = build_request(old="numpy", new="numpy", shapes="64x64, 100x32 along 0", kinds="fft", layouts="C,F",
                        budget=2.0)
    clock = Clock()
    doc = run_gate(req, sampler_factory=lambda _req: LayoutSampler(clock), clock=clock)
    rows = {(r["kind"], r["layout"]): r for r in doc["rows"]}
    assert set(rows) == {("fftn", "C"), ("fftn", "F"), ("fft", "C"), ("fft", "F")}
    for (kind, layout), r in rows.items():
        assert r["verdict"] == ("slower" if layout == "F" else "same"), r
        if layout == "F":
            assert r["ratio"] == pytest.approx(1.2, rel=0.02)
    assert rows[("fft", "C")]["shape"] == [100, 32] and rows[("fft", "C")]["axes"] == [0]
    assert rows[("fft", "C")]["batch"] == 32 and rows[("fft", "C")]["points"] == 100 == rows[("fft", "C")]["n"]
    assert rows[("fftn", "F")]["points"] == 4096 and rows[("fftn", "F")]["batch"] == 1
    assert doc["regressed"] is True and doc["request"]["shapes"]
    json.dumps(doc)

    from fftgauge.harness.gate.outputs import markdown_summary, summary_text

    assert "64x64 axes=0,1 F" in markdown_summary(doc) and "100x32 axes=0 C" in summary_text(doc)


@pytest.mark.parametrize("layout", ["C", "F", "strided", "reversed"])
def test_gate_jobs_prepare_and_sample_a_shaped_case_in_its_layout(layout):
    """The worker jobs in this process: the prepared input lies as the layout says, the blocks
    are positive per-call seconds, and release forgets the case."""
    from fftgauge.harness.gate import sampling

    case = ShapeCase("rfftn", "float64", (16, 8), (0, 1), layout)
    fields = case_fields(case)
    info = sampling.prepare_case(NumpyBackend(), fields, 11)
    assert info["loops"] >= 1
    x = sampling._PREPARED[(fields, 11)].x
    assert x.shape == (16, 8) and x.dtype == np.float64
    flags = {"C": x.flags["C_CONTIGUOUS"], "F": x.flags["F_CONTIGUOUS"] and not x.flags["C_CONTIGUOUS"],
             "strided": not (x.flags["C_CONTIGUOUS"] or x.flags["F_CONTIGUOUS"]),
             "reversed": all(s < 0 for s in x.strides)}
    assert flags[layout]
    block = sampling.sample_block(NumpyBackend(), fields, None, 3, 11)
    assert len(block) == 3
    sampling.release_case(NumpyBackend(), fields, 11)
    assert (fields, 11) not in sampling._PREPARED


def test_gate_shapes_in_stored_mode_exits_2_with_one_line(tmp_path):
    out = subprocess.run([sys.executable, "-m", "fftgauge", "gate", "--baseline", str(tmp_path), "--backend",
                          "numpy", "--shapes", "8x8", "--sizes", "64", "--json", str(tmp_path / "g.json")],
                         capture_output=True, text=True, timeout=120)
    assert out.returncode == 2
    lines = out.stderr.strip().splitlines()
    assert len(lines) == 1 and "--shapes" in lines[0] and "Traceback" not in out.stderr


def test_a_shaped_time_file_as_stored_baseline_says_what_it_holds(tmp_path):
    """A baseline written by fftgauge time --shapes is read back as its shaped cases."""
    from fftgauge.harness.gate.history import case_of, load_stored_runs

    out = subprocess.run([sys.executable, "-m", "fftgauge", "time", "--backend", "numpy", "--shapes", "4x4",
                          "--kinds", "fftn", "--samples", "5", "--rounds", "1", "--no-memory", "--quiet",
                          "--json", str(tmp_path / "t.json")], capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stderr
    (run,), _, _ = load_stored_runs(str(tmp_path / "t.json"), 5, False)
    assert [case_of(r) for r in run.rows] == [ShapeCase("fftn", "float64", (4, 4), (0, 1), "C")]
