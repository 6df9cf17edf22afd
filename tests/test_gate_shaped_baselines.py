"""Shaped cases in the gate's stored, referenced and record modes: saved runs keyed by kind,
precision, shape, axes and layout (a shaped 8x8 case and a 1-D n = 64 case never mix), a run
stored before shapes existed (1-D rows only) still read, a case asked for but absent from the
baseline reported as for 1-D cases, on a fake sampler and a fake clock (no timing assertion);
one slow end-to-end record-then-stored run in worker processes."""

from __future__ import annotations

import json
import os

import numpy as np
import pytest

from fftgauge.harness import cli
from fftgauge.harness.cases import Case
from fftgauge.harness.errors import UsageError
from fftgauge.harness.gate.history import (baseline_for, case_of, load_stored_runs, save_run, shapes_not_stored,
                                           stored_cases)
from fftgauge.harness.gate.request import build_request
from fftgauge.harness.results import envelope
from fftgauge.harness.shapes.case import ShapeCase
from fftgauge.harness.shapes.fields import row_fields
from fftgauge.harness.shapes.grammar import parse_shapes

C88 = ShapeCase("fftn", "float64", (8, 8), (0, 1), "C")
F88 = ShapeCase("fftn", "float64", (8, 8), (0, 1), "F")
BATCH = ShapeCase("fft", "float64", (100, 32), (0,), "C")


class Clock:
    """Seconds that pass only when the fake sampler says so."""

    def __init__(self):
        self.now = 0.0

    def __call__(self):
        return self.now


class ShapedSampler:
    """Stands in for WorkerSampler: per-call seconds from a seeded lognormal (sigma 1%) around
    ``base`` seconds, times ``slower`` on the cases ``slow(case)`` picks (the ``new`` side, or
    the one candidate of stored and record mode); a yardstick block per draw; each block pair
    moves the fake clock by 10 ms."""

    def __init__(self, clock, base=1e-4, slower=1.0, slow=lambda case: False, seed=5, labels=None):
        self.clock, self.base, self.slower, self.slow = clock, base, slower, slow
        self.rng = np.random.default_rng(seed)
        self.labels = labels or {}
        self.yardstick_failure = None

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        return None

    def claims(self, key, cases):
        from types import SimpleNamespace

        label = self.labels.get(key, key)
        return SimpleNamespace(label=label, reasons=(None,) * len(cases),
                               record=lambda spec: {"spec": spec, "name": label})

    def prepare(self, item):
        return {item.new_key: {"plan_seconds": 0.0, "loops": 1}}

    def _block(self, median):
        return list(median * np.exp(self.rng.normal(0.0, 0.01, 5)))

    def sample(self, item, pairs):
        from fftgauge.harness.gate.sampling import Draw

        draw = Draw()
        factor = self.slower if self.slow(item.case) else 1.0
        for _ in range(pairs):
            draw.new.extend(self._block(self.base * factor))
            if item.old_key:
                draw.old.extend(self._block(self.base))
        draw.yardstick.extend(self._block(1e-3))
        self.clock.now += pairs * 0.01
        return draw

    def release(self, item):
        pass


def _fake_run(req, sampler, clock):
    from fftgauge.harness.gate.run import run_gate

    return run_gate(req, sampler_factory=lambda _req: sampler, clock=clock)


def _row(case, seconds, backend="numpy", **extra):
    """A stored timed row of ``case`` (a 1-D row has no shape fields, as rows before shapes had none)."""
    n = case.points if isinstance(case, ShapeCase) else case.n
    return {"backend": backend, "kind": case.kind, "dtype": case.dtype, "n": n, "norm": "backward",
            "status": "ok", "seconds": seconds, "seconds_low": seconds * 0.99, "seconds_high": seconds * 1.01,
            **row_fields(case), **extra}


def _write(folder, name, rows, schema="fftgauge-gate/1", created=None):
    doc = envelope(schema, 1, extra={"complete": True, "backends": {"numpy": {"spec": "numpy"}}})
    doc["rows"] = rows
    if created:
        doc["created"] = created
    os.makedirs(folder, exist_ok=True)
    path = os.path.join(folder, name)
    with open(path, "w") as fh:
        json.dump(doc, fh)
    return path


def test_a_run_from_before_shapes_and_a_shaped_run_are_read_each_by_its_own_key(tmp_path):
    """A 1-D time file as written before shapes (no shape fields) beside a shaped gate run whose
    8x8 rows have the same n = 64: every row reads back as its own case, and each case's baseline
    is its own row's time."""
    folder = tmp_path / "hist"
    _write(folder, "old.json", [_row(Case("fft", "float64", 64), 1e-6)], schema="fftgauge-time/1",
           created="2026-12-01T00:00:00Z")
    _write(folder, "shaped.json", [_row(C88, 2e-6), _row(F88, 3e-6), _row(BATCH, 4e-6)],
           created="2026-12-02T00:00:00Z")
    runs, _, _ = load_stored_runs(str(folder), 5, False)
    assert [case_of(r) for run in runs for r in run.rows] == [Case("fft", "float64", 64), C88, F88, BATCH]
    assert stored_cases(runs, "numpy") == [Case("fft", "float64", 64), BATCH, C88, F88]
    for case, seconds in ((Case("fft", "float64", 64), 1e-6), (C88, 2e-6), (F88, 3e-6), (BATCH, 4e-6)):
        raw, _, _ = baseline_for(runs, "numpy", case, 0.95)
        assert raw.raw_seconds == pytest.approx(seconds) and raw.runs == 1
    # the filters: --sizes keeps 1-D cases, --shapes shaped ones (--layouts, --kinds in the family's form)
    assert stored_cases(runs, "numpy", sizes=(64,)) == [Case("fft", "float64", 64)]
    assert stored_cases(runs, "numpy", shapes=parse_shapes("8x8")) == [C88, F88]
    assert stored_cases(runs, "numpy", shapes=parse_shapes("8x8"), layouts=("F",)) == [F88]
    assert stored_cases(runs, "numpy", kinds=("fft",), shapes=parse_shapes("8x8,100x32 along 0")) == [BATCH, C88, F88]
    assert stored_cases(runs, "numpy", kinds=("ifft",), shapes=parse_shapes("8x8")) == []
    assert shapes_not_stored(runs, "numpy", parse_shapes("8x8, 4x4, 100x32 along 1")) == ["4x4", "100x32 along 1"]


@pytest.mark.parametrize("change", [dict(axes=[2]), dict(shape=[8, 0]), dict(layout="diagonal"),
                                    dict(kind="fftn", shape=[8], axes=[0]), dict(axes="0,1")])
def test_an_impossible_shaped_row_is_a_corrupt_file(tmp_path, change):
    path = _write(tmp_path, "bad.json", [{**_row(C88, 2e-6), **change}])
    with pytest.raises(UsageError, match="impossible shaped case.*the file is corrupt"):
        load_stored_runs(path, 5, False)


def _record_history(folder, runs=3):
    """Record ``runs`` saved runs of the shaped cases (record mode, the fake sampler's times)."""
    for i in range(runs):
        req = build_request(backends=["numpy"], save=str(folder), shapes="8x8, 100x32 along 0", kinds="fft",
                            layouts="C,F", budget=1.0, seed=10 + i)
        clock = Clock()
        doc = _fake_run(req, ShapedSampler(clock, seed=20 + i), clock)
        assert doc["outcome"] == "pass" and doc["complete"] and doc["mode"] == "record"
        save_run(doc, str(folder))


def test_stored_mode_gates_saved_shaped_runs_same_code_same_and_one_layout_slower(tmp_path):
    """Three saved record runs of four shaped cases (fftn 8x8 and a batch of 32 transforms along
    axis 0, C and F): the same distribution measured again reads ``same`` everywhere; the
    candidate 20% slower on Fortran-order inputs only reads ``slower`` there (ratio near 1.2),
    ``same`` on the C rows. A 1-D run stored before shapes sits in the same folder."""
    folder = tmp_path / "hist"
    _write(folder, "old-1d.json", [_row(Case("fft", "float64", 64), 1e-6)], schema="fftgauge-time/1",
           created="2026-01-01T00:00:00Z")
    _record_history(folder)
    runs, _, _ = load_stored_runs(str(folder), 5, False)
    assert len(runs) == 4

    req = build_request(backends=["numpy"], baseline=str(folder), shapes="8x8, 100x32 along 0", budget=1.0)
    assert req.mode == "stored" and len(req.shape_specs) == 2 and req.sizes is None
    clock = Clock()
    same = _fake_run(req, ShapedSampler(clock, seed=99), clock)
    rows = {(r["kind"], r["layout"]): r for r in same["rows"]}
    assert set(rows) == {("fftn", "C"), ("fftn", "F"), ("fft", "C"), ("fft", "F")}  # not the 1-D n = 64 row
    for r in rows.values():
        assert r["verdict"] == "same" and r["baseline_runs"] == 3 and r["yardstick_corrected"], r
    assert same["outcome"] == "pass" and same["request"]["shapes"] == ["8x8", "100x32 along 0"]

    clock = Clock()
    slow = _fake_run(req, ShapedSampler(clock, slower=1.2, slow=lambda c: c.layout == "F", seed=98), clock)
    rows = {(r["kind"], r["layout"]): r for r in slow["rows"]}
    for (kind, layout), r in rows.items():
        assert r["verdict"] == ("slower" if layout == "F" else "same"), r
    assert rows[("fft", "F")]["ratio"] == pytest.approx(1.2, rel=0.03)
    assert rows[("fft", "F")]["shape"] == [100, 32] and rows[("fft", "F")]["batch"] == 32
    assert slow["regressed"] is True

    from fftgauge.harness.gate.outputs import summary_text
    assert "100x32 axes=0 F" in summary_text(slow)


def test_stored_mode_without_shapes_re_measures_every_stored_case_and_with_sizes_the_1d_ones(tmp_path):
    folder = tmp_path / "hist"
    _write(folder, "old-1d.json", [_row(Case("fft", "float64", 64), 1e-4)], schema="fftgauge-time/1",
           created="2026-01-01T00:00:00Z")
    _record_history(folder, runs=1)
    clock = Clock()
    doc = _fake_run(build_request(backends=["numpy"], baseline=str(folder), budget=0.5), ShapedSampler(clock), clock)
    assert sorted((r["kind"], r["n"], r.get("layout") or "-") for r in doc["rows"]) == [
        ("fft", 64, "-"), ("fft", 100, "C"), ("fft", 100, "F"), ("fftn", 64, "C"), ("fftn", 64, "F")]
    clock = Clock()
    doc = _fake_run(build_request(backends=["numpy"], baseline=str(folder), sizes="64", budget=0.5),
                    ShapedSampler(clock), clock)
    assert [(r["kind"], r["n"], r.get("shape")) for r in doc["rows"]] == [("fft", 64, None)]
    clock = Clock()  # an n name picks its family's shaped rows (the batch's fft too), not the 1-D fft
    doc = _fake_run(build_request(backends=["numpy"], baseline=str(folder), kinds="fftn", budget=0.5),
                    ShapedSampler(clock), clock)
    assert sorted((r["kind"], r["layout"]) for r in doc["rows"]) == [("fft", "C"), ("fft", "F"), ("fftn", "C"),
                                                                     ("fftn", "F")]
    assert all(r["shape"] for r in doc["rows"])


def test_a_shaped_case_absent_from_the_baseline_is_named_and_none_at_all_is_exit_2(tmp_path):
    """Stored mode: a --shapes item the baseline lacks is named in the notes (the others are
    gated); when none is stored, the request is refused naming --shapes, as --sizes is."""
    folder = tmp_path / "hist"
    _record_history(folder, runs=1)
    clock = Clock()
    doc = _fake_run(build_request(backends=["numpy"], baseline=str(folder), shapes="8x8, 4x4", budget=0.5),
                    ShapedSampler(clock), clock)
    assert {r["layout"] for r in doc["rows"]} == {"C", "F"} and all(r["shape"] == [8, 8] for r in doc["rows"])
    assert any("not in the baseline of numpy, so not gated: 4x4" in note for note in doc["notes"]), doc["notes"]
    clock = Clock()
    with pytest.raises(UsageError, match="no stored case of backend 'numpy' matches --kinds/--dtypes/--shapes"):
        _fake_run(build_request(backends=["numpy"], baseline=str(folder), shapes="4x4"), ShapedSampler(clock), clock)


def test_referenced_mode_compares_shaped_ab_ratios_and_skips_a_case_without_one(tmp_path):
    """A saved A/B run holds the ratio of ``mine`` against numpy for the C-order 8x8 case only:
    this run's C case is compared with it (equal sides: ``same``), the F case is a ``skip``
    with the message an absent 1-D case gets."""
    folder = tmp_path / "hist"
    _write(folder, "ab.json", [_row(C88, 2e-6, backend="mine", baseline_backend="numpy", ab_ratio=1.0,
                                    ab_ratio_low=0.99, ab_ratio_high=1.01, ratio=1.0)])
    req = build_request(old="numpy", new="mine.py:fft", baseline=str(folder), shapes="8x8", kinds="fftn",
                        layouts="C,F", budget=0.5)
    assert req.mode == "referenced" and [c.layout for c in req.shape_cases] == ["C", "F"]
    clock = Clock()
    doc = _fake_run(req, ShapedSampler(clock, labels={"old": "numpy", "new": "mine"}), clock)
    rows = {r["layout"]: r for r in doc["rows"]}
    assert rows["C"]["status"] == "ok" and rows["C"]["verdict"] == "same" and rows["C"]["baseline_runs"] == 1
    assert rows["F"]["status"] == "skip"
    assert rows["F"]["message"] == "no stored A/B ratio of mine against numpy for this case in the baseline"


@pytest.mark.parametrize("argv, needle", [
    (["--shapes", "8x8", "--sizes", "64"], "--shapes and --sizes"),
    (["--shapes", "8x8", "--accuracy"], "--accuracy"),
    (["--layouts", "F"], "--layouts goes with --shapes"),
    (["--shapes", "8x8", "--layouts", "diagonal"], "diagonal"),
    (["--shapes", "8x0"], "8x0"),
])
def test_bad_stored_shaped_requests_exit_2_with_one_line(tmp_path, capsys, argv, needle):
    _record_history(tmp_path / "hist", runs=1)
    assert cli.main(["gate", "--backend", "numpy", "--baseline", str(tmp_path / "hist"), "--json",
                     str(tmp_path / "g.json"), *argv]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and needle in err and "Traceback" not in err, err


@pytest.mark.slow
def test_record_then_stored_shaped_gate_end_to_end(tmp_path):
    """In worker processes: a record run of numpy on a 16x16 fftn saved, then a stored-mode run
    that re-measures it from the folder (its verdict is the machine's; the plumbing is tested)."""
    history = tmp_path / "history"
    assert cli.main(["gate", "--backend", "numpy", "--shapes", "16x16", "--kinds", "fftn", "--budget", "0.5",
                     "--quiet", "--save", str(history), "--json", str(tmp_path / "r.json")]) == 0
    js = tmp_path / "s.json"
    code = cli.main(["gate", "--backend", "numpy", "--baseline", str(history), "--threshold", "50%", "--budget",
                     "0.5", "--quiet", "--json", str(js)])
    doc = json.loads(js.read_text())
    (row,) = doc["rows"]
    assert doc["mode"] == "stored" and row["status"] == "ok" and row["verdict"] in ("same", "faster", "slower")
    assert code == (1 if row["verdict"] == "slower" else 0)
    assert row["shape"] == [16, 16] and row["axes"] == [0, 1] and row["layout"] == "C" and row["n"] == 256
    assert row["baseline_runs"] == 1 and row["seconds"] > 0


def test_report_of_a_history_with_saved_shaped_runs_plots_the_1d_cases(tmp_path):
    """``fftgauge report DIR`` on a folder holding saved shaped gate runs beside 1-D ones: the
    history plots follow the 1-D case; the shaped rows neither break it nor join its points."""
    from fftgauge.harness.report.history_plot import history_points
    from fftgauge.harness.report.inputs import history_cases

    folder = tmp_path / "hist"
    _record_history(folder, runs=1)
    _write(folder, "old-1d.json", [_row(Case("fft", "float64", 64), 1e-6)], schema="fftgauge-time/1",
           created="2026-01-01T00:00:00Z")
    docs = [json.loads((folder / name).read_text()) for name in sorted(os.listdir(folder))]
    assert history_cases(docs) == ([Case("fft", "float64", 64)], 1)
    points = history_points(docs, Case("fft", "float64", 64))
    assert [p[1] for p in points["seconds"]["numpy"]] == [1e-6]  # not the 8x8 rows' n = 64
    assert cli.main(["report", str(folder), "--out", str(tmp_path / "rep")]) == 0
