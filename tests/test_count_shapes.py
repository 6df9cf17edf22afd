"""Instruction counts of shaped cases: the count driver's arguments for a shaped case and their
reading back, the driver laying the input out as the case says, K by the whole array's work,
the gate's A/B, stored and referenced modes on shaped counts and ``fftgauge time``'s count
fields of a shaped row (``count_sides`` replaced by a fake: no valgrind), and one slow count
under valgrind of a fixed 5% of extra work in an N-D transform (4 counted runs)."""

from __future__ import annotations

import json
import math
import os
import shutil

import numpy as np
import pytest

from fftgauge.backends.numpy_fft import NumpyBackend
from fftgauge.harness.cases import Case
from fftgauge.harness.counts import cachegrind, driver, fingerprint, measure
from fftgauge.harness.counts.cachegrind import calls_for, default_calls, driver_command
from fftgauge.harness.counts.measure import CaseCount
from fftgauge.harness.gate.request import build_request
from fftgauge.harness.shapes.case import ShapeCase
from fftgauge.harness.shapes.timed import timing_input

HERE = os.path.dirname(os.path.abspath(__file__))
FIXED_SHAPED = os.path.join(HERE, "data", "fixed_work_shaped_fft.py")
HERE_FP = {"instruction_set": {"baseline": ["X86_V2"], "found": ["X86_V3"]}, "machine": "x86_64",
           "python": "CPython 3.11.7", "libraries": {"fftgauge": "0.2.0", "numpy": "2.4.6"},
           "numpy_build": {"compiler": "gcc 14.2.1", "blas": "scipy-openblas 0.3.31"}, "valgrind": "valgrind-3.19.0"}

C88 = ShapeCase("fftn", "float64", (8, 8), (0, 1), "C")
BATCH = ShapeCase("fft", "float64", (100, 32), (0,), "C")


@pytest.mark.parametrize("case", [C88, ShapeCase("fft", "float32", (1000, 64), (-1,), "reversed"),
                                  ShapeCase("rfftn", "float64", (12, 10, 6), (2, 0), "F", "ortho"),
                                  ShapeCase("irfft", "float64", (16, 9), (1,), "strided")])
def test_driver_arguments_of_a_shaped_case_read_back_as_the_case(case):
    argv = driver_command("numpy", case, 1234, 10, 1)
    assert argv[2] == cachegrind.DRIVER and argv[3] == "numpy"
    kind, dtype, n, norm, seed, calls, threads, *shaped = argv[4:]
    assert (int(n), seed, calls, threads) == (case.points, "1234", "10", "1") and len(shaped) == 3
    assert driver.parse_case(kind, dtype, n, norm, shaped) == case


def test_driver_arguments_of_a_1d_case_are_unchanged():
    """The 1-D form ``SPEC KIND DTYPE N NORM SEED K THREADS`` of stored runs and of the docs."""
    argv = driver_command("numpy", Case("rfft", "float32", 96, "ortho"), 7, 20, 2)
    assert argv[3:] == ["numpy", "rfft", "float32", "96", "ortho", "7", "20", "2"]
    assert driver.parse_case("rfft", "float32", "96", "ortho", []) == Case("rfft", "float32", 96, "ortho")


def test_driver_refuses_a_partial_shape_with_one_line(capsys):
    assert driver.main(["numpy", "fftn", "float64", "64", "backward", "1", "2", "1", "8x8"]) == cachegrind.DRIVER_FAILED
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "SHAPE AXES LAYOUT" in err, err


@pytest.mark.parametrize("layout", ["C", "F", "strided", "reversed"])
def test_the_driver_lays_the_input_out_as_the_case_says(layout):
    """The driver's plan and input (in this process): the input holds the values every timed run
    of the case gets (same seed), lying in memory as the layout says; the transform runs on it."""
    case = ShapeCase("fftn", "float64", (16, 8), (0, 1), layout)
    plan, x = driver.prepared_plan(NumpyBackend(), case, 11)
    flags = {"C": x.flags["C_CONTIGUOUS"], "F": x.flags["F_CONTIGUOUS"] and not x.flags["C_CONTIGUOUS"],
             "strided": not (x.flags["C_CONTIGUOUS"] or x.flags["F_CONTIGUOUS"]),
             "reversed": all(s < 0 for s in x.strides)}
    assert flags[layout] and np.array_equal(x, timing_input(case, 11))
    assert np.asarray(plan.execute(x)).shape == (16, 8)
    assert driver.main(["numpy", "fftn", "float64", "128", "backward", "11", "2", "1", "16x8", "0,1", layout]) == 0


def test_k_of_a_shaped_case_is_by_the_whole_arrays_work():
    # about 2^21 points x log2 N per counted run (fftgauge.harness.counts.cachegrind.TARGET_POINT_LOGS)
    assert calls_for(ShapeCase("fft", "float64", (1000, 64), (-1,))) == math.ceil(2 ** 21 / (1000 * 64 * 6)) == 6
    assert calls_for(C88) == default_calls(64) == 1000
    # 2^21 / (65536 x 16) = 2, raised to the least K, 4
    assert calls_for(ShapeCase("fftn", "float64", (256, 256), (0, 1))) == max(4, math.ceil(2 ** 21 / (65536 * 16))) == 4
    assert calls_for(Case("fft", "float64", 1024)) == default_calls(1024)


class FakeCounts:
    """Stands in for :func:`fftgauge.harness.counts.measure.count_sides`: per call, 1000
    instructions per point of the array, times ``extra[(spec, case)]``; repeats differ by 1e-7."""

    def __init__(self, extra=None):
        self.extra = extra or {}
        self.calls = []

    def __call__(self, valgrind, specs, case, *, seed, calls, repeats, threads=1, cache_sim=False, timeout=120.0,
                 workers=None, caches=None):
        self.calls.append((case, calls, repeats))
        out = {}
        for key, spec in specs.items():
            base = 1000.0 * case.points * case.batch * self.extra.get((spec, case), 1.0)
            out[key] = CaseCount(calls, tuple(base * (1 + 1e-7 * r) for r in range(repeats)), None, 0.0)
        return out


@pytest.fixture
def fake_valgrind(monkeypatch):
    """Counting without valgrind: a valgrind path, its version, this fingerprint, and FakeCounts."""
    monkeypatch.setattr(cachegrind, "find_valgrind", lambda: "/usr/bin/valgrind")
    monkeypatch.setattr(cachegrind, "valgrind_version", lambda path: "valgrind-3.19.0")
    monkeypatch.setattr(fingerprint, "count_fingerprint", lambda path, timeout=120.0: HERE_FP)

    def install(extra=None):
        fake = FakeCounts(extra)
        monkeypatch.setattr(measure, "count_sides", fake)
        return fake

    return install


def test_gate_counts_shaped_cases_in_ab_stored_and_referenced_modes(fake_valgrind, tmp_path):
    """A/B: scipy's side 5% more instructions on the batched case only: that row ``slower``
    (ratio 1.05), the 8x8 rows ``same``; K by the whole array. The run saved is then the stored
    baseline of scipy's shaped counts (same counts: ``same``, the stored repeats pooled) and the
    reference of a referenced run (the same A/B ratios: ``same``)."""
    from fftgauge.harness.gate.history import save_run
    from fftgauge.harness.gate.run import run_gate

    fake = fake_valgrind({("scipy", BATCH): 1.05})
    req = build_request(old="numpy", new="scipy", metric="instructions", shapes="8x8, 100x32 along 0", kinds="fft",
                        count_repeats=2)
    doc = run_gate(req)
    rows = {(r["kind"], tuple(r["shape"])): r for r in doc["rows"]}
    assert set(rows) == {("fftn", (8, 8)), ("fft", (100, 32))} and doc["outcome"] == "regression"
    batch, square = rows[("fft", (100, 32))], rows[("fftn", (8, 8))]
    assert batch["verdict"] == "slower" and batch["ratio"] == pytest.approx(1.05, rel=1e-6)
    assert square["verdict"] == "same" and square["ratio"] == pytest.approx(1.0, rel=1e-6)
    assert batch["instructions"] == pytest.approx(1.05 * 1000 * 3200, rel=1e-6) and batch["metric"] == "instructions"
    assert batch["batch"] == 32 and batch["points"] == 100 and batch["layout"] == "C"
    assert sorted((c.label(), k) for c, k, _ in fake.calls) == sorted(
        [(BATCH.label(), calls_for(BATCH)), (C88.label(), calls_for(C88))])
    assert doc["counting"]["fingerprint"] == HERE_FP
    save_run(json.loads(json.dumps(doc)), str(tmp_path))

    stored = run_gate(build_request(backends=["scipy"], baseline=str(tmp_path), metric="instructions",
                                    shapes="100x32 along 0", count_repeats=2))
    (row,) = stored["rows"]
    assert row["shape"] == [100, 32] and row["verdict"] == "same" and row["ratio"] == pytest.approx(1.0, rel=1e-6)
    assert row["baseline_runs"] == 1 and row["baseline_instructions_repeats"] == batch["instructions_repeats"]

    referenced = run_gate(build_request(old="numpy", new="scipy", baseline=str(tmp_path), metric="instructions",
                                        shapes="8x8, 100x32 along 0, 4x4", kinds="fft", count_repeats=2))
    rows = {tuple(r["shape"]): r for r in referenced["rows"]}
    assert rows[(100, 32)]["verdict"] == "same" and rows[(100, 32)]["ab_ratio"] == pytest.approx(1.05, rel=1e-6)
    assert rows[(8, 8)]["verdict"] == "same" and rows[(4, 4)]["status"] == "skip"


def test_time_counts_a_shaped_row_per_call_and_per_point_of_the_array(fake_valgrind):
    from fftgauge.harness.counts.table import add_counts, counts_table
    from fftgauge.harness.shapes.fields import row_fields

    fake = fake_valgrind()
    doc = {"seed": 3, "backends": {"numpy": {"spec": "numpy"}},
           "rows": [{"backend": "numpy", "kind": "fft", "dtype": "float64", "n": 100, "norm": "backward",
                     "status": "ok", "seconds": 2e-5, **row_fields(BATCH)}]}
    add_counts(doc)
    (row,) = doc["rows"]
    assert fake.calls[0][0] == BATCH and fake.calls[0][1] == calls_for(BATCH)
    assert row["instructions"] == pytest.approx(3.2e6)  # per call: 32 transforms of 100 points
    assert row["instructions_per_point"] == pytest.approx(3.2e6 / 3200)
    assert row["instructions_per_nlogn"] == pytest.approx(3.2e6 / (32 * 100 * math.log2(100)))
    assert row["ns_per_instruction"] == pytest.approx(2e-5 * 1e9 / 3.2e6)
    assert "fft float64 100x32 axes=0 C" in counts_table(doc["rows"])


@pytest.mark.slow
@pytest.mark.skipif(shutil.which("valgrind") is None, reason="valgrind is not installed")
def test_counts_of_a_shaped_case_see_five_percent_more_work():
    """Under valgrind (4 counted runs): an 8x8 fftn on a Fortran-order input computed 100 and 105
    times per call; per call, the K/2K difference sees the 5% (measured 1.05002 with K = 4)."""
    got = measure.count_sides(cachegrind.require_valgrind(),
                              {"base": f"{FIXED_SHAPED}:fftn[kind=fftn]", "plus5": f"{FIXED_SHAPED}:fftn_plus5[kind=fftn]"},
                              ShapeCase("fftn", "float64", (8, 8), (0, 1), "F"), seed=1234, calls=4, repeats=1)
    ratio = got["plus5"].median / got["base"].median
    assert 1.045 < ratio < 1.052, ratio
    assert got["base"].median > 100 * 64  # a hundred 64-point transforms per call, at least one instruction a point
