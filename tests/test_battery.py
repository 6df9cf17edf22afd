"""Tests of the battery's engine (harness/battery.py) and of the pieces of the checks that
make it quick without changing what they measure (harness/checks.py).

Sources: exact integer arithmetic (Python integers, numpy int64) for the exact circular
convolution; the in-process :func:`fftgauge.harness.battery.checks.check_case` for what the worker
processes must report; threadpoolctl's own report for the BLAS thread cap.
"""

from __future__ import annotations

import os
import textwrap
import threading

import numpy as np
import psutil
import pytest

from fftgauge.backends.registry import load_backend
from fftgauge.harness.battery import run as battery
from fftgauge.harness.battery import checks
from fftgauge.harness.battery import exact_checks
from fftgauge.harness.battery import thread_crew
from fftgauge.harness.cases import Case


def _spawned_workers() -> set[int]:
    """Pids of the live worker processes below this one: spawned children run ``spawn_main``
    (multiprocessing's resource tracker, which outlives every worker, does not)."""
    pids = set()
    for child in psutil.Process().children(recursive=True):
        try:
            if any("spawn_main" in part for part in child.cmdline()):
                pids.add(child.pid)
        except (psutil.NoSuchProcess, psutil.ZombieProcess):
            pass
    return pids


# -- exact circular convolution ----------------------------------------------------------------

def _python_circular_convolution(x: list[complex], y: list[complex]) -> list[complex]:
    """The defining sum z[k] = sum_j x[j] y[(k - j) mod n] in Python integers (exact)."""
    n = len(x)
    xs = [(int(v.real), int(v.imag)) for v in x]
    ys = [(int(v.real), int(v.imag)) for v in y]
    out = []
    for k in range(n):
        re = im = 0
        for j in range(n):
            a, b = xs[j]
            c, d = ys[(k - j) % n]
            re += a * c - b * d
            im += a * d + b * c
        out.append(complex(re, im))
    return out


@pytest.mark.parametrize("n", [1, 2, 3, 16, 61, 200])
def test_exact_circular_convolution_equals_integer_sums(n):
    """The float64 sums of the convolution check equal the defining sum in Python integers."""
    rng = np.random.default_rng(n)
    r = exact_checks.CONVOLUTION_RANGE
    x = rng.integers(-r, r + 1, n) + 1j * rng.integers(-r, r + 1, n)
    y = rng.integers(-r, r + 1, n) + 1j * rng.integers(-r, r + 1, n)
    got = exact_checks.exact_circular_convolution(x, y)
    assert got.tolist() == _python_circular_convolution(x.tolist(), y.tolist())


def test_exact_circular_convolution_is_exact_at_the_largest_values():
    """At DIRECT_CONVOLUTION_MAX_N with every input at the range's edge (the largest sums the
    check can meet) the float64 sums equal int64 sums (exact integer arithmetic)."""
    n = exact_checks.DIRECT_CONVOLUTION_MAX_N
    r = exact_checks.CONVOLUTION_RANGE
    rng = np.random.default_rng(1)
    signs = lambda: rng.choice([-r, r], n)  # noqa: E731
    xr, xi, yr, yi = signs(), signs(), signs(), signs()
    xr[:] = r  # one all-equal part: sums reach n r^2 in magnitude
    yr[:] = r

    def circ(a, b):
        lin = np.convolve(a.astype(np.int64), b.astype(np.int64))
        out = lin[:n].copy()
        out[: lin.size - n] += lin[n:]
        return out

    want_re = circ(xr, yr) - circ(xi, yi)
    want_im = circ(xr, yi) + circ(xi, yr)
    assert np.max(np.abs(want_re)) >= n * r * r
    got = exact_checks.exact_circular_convolution(xr + 1j * xi, yr + 1j * yi)
    assert np.array_equal(got.real, want_re.astype(np.float64))
    assert np.array_equal(got.imag, want_im.astype(np.float64))


# -- the concurrent check's threads ----------------------------------------------------------

def test_thread_crew_runs_its_tasks_at_the_same_time():
    """Four tasks that each wait for all four at a barrier finish only if they run at once."""
    crew = thread_crew.ThreadCrew(4)
    barrier = threading.Barrier(4, timeout=10)
    names = []

    def task():
        barrier.wait()
        names.append(threading.current_thread().name)

    assert crew.run([task] * 4, timeout_seconds=30)
    assert len(set(names)) == 4
    names.clear()
    assert crew.run([task] * 4, timeout_seconds=30)  # the same threads again
    assert len(set(names)) == 4


def test_thread_crew_reports_an_overrun_and_is_replaced():
    release = threading.Event()
    crew = thread_crew.thread_crew()
    try:
        assert not crew.run([release.wait, lambda: None], timeout_seconds=0.2)
        assert crew.broken
        with pytest.raises(RuntimeError, match="still busy"):
            crew.run([lambda: None], timeout_seconds=1)
        fresh = thread_crew.thread_crew()
        assert fresh is not crew and fresh.run([lambda: None] * thread_crew.CREW_SIZE, timeout_seconds=30)
    finally:
        release.set()


def test_thread_crew_survives_a_task_that_raises():
    crew = thread_crew.ThreadCrew(2)

    def bad():
        raise ValueError("boom")

    assert crew.run([bad, bad], timeout_seconds=30)
    assert crew.run([lambda: None, lambda: None], timeout_seconds=30)


# -- the queue of batches ---------------------------------------------------------------------

def _claims(specs_reasons: dict[str, list]) -> dict:
    from fftgauge.backends.claims import BackendClaims, BackendDescription, Capabilities

    return {spec: BackendClaims(spec, BackendDescription(spec, "test", "", {}, Capabilities()), tuple(reasons))
            for spec, reasons in specs_reasons.items()}


def _queue(sizes=(4, 64, 8, 2)):
    req = battery.BatteryRequest(specs=("a", "b"), kinds=("fft", "rfft"), dtypes=("float64",), sizes=sizes)
    cases = battery.build_cases(req, ("fft", "rfft"))
    claims = _claims({"a": [None] * len(cases), "b": [None if c.n != 8 else "no" for c in cases]})
    return battery.BatchQueue(req, claims, cases), cases


def test_batch_queue_batches_cover_the_claimed_cases_once():
    queue, cases = _queue()
    assert (queue.total_cases, queue.total_batches) == (14, 7)
    taken, spec = [], None
    while (batch := queue.next(spec)) is not None:
        taken.append(batch)
        spec = batch.spec
    assert len(taken) == 7
    assert all(len({cases[i].n for i in b.indices}) == 1 for b in taken)
    assert sorted((b.spec, i) for b in taken for i in b.indices) == sorted(
        [("a", i) for i in range(len(cases))] + [("b", i) for i, c in enumerate(cases) if c.n != 8])


def test_batch_queue_keeps_lanes_on_their_backend_largest_size_first():
    """A lane keeps its backend, largest size first; a new lane takes the backend no lane has
    started; a lane whose backend is done joins the one with two or more batches left, and
    stops when the others have one left (the lane on it takes it)."""
    queue, cases = _queue()
    n_of = lambda batch: cases[batch.indices[0]].n  # noqa: E731
    first, second = queue.next(None), queue.next(None)
    assert (first.spec, n_of(first), second.spec, n_of(second)) == ("a", 64, "b", 64)
    assert [n_of(queue.next("a")) for _ in range(3)] == [8, 4, 2]
    joined = queue.next("a")  # a is done; b has 4 and 2 left
    assert (joined.spec, n_of(joined)) == ("b", 4)
    assert queue.next("a") is None  # b has one batch left
    last = queue.next("b")
    assert (last.spec, n_of(last)) == ("b", 2) and queue.next("b") is None and queue.next(None) is None


# -- the worker job --------------------------------------------------------------------------

def test_case_job_caps_blas_threads_in_the_worker():
    """After a battery job, the worker's BLAS pools report the cap (threadpoolctl's report);
    the rows are those of the in-process check."""
    from fftgauge.harness.execution import jobs
    from fftgauge.harness.execution.worker import Worker

    fields = ("fft", "float64", 16, "backward")
    with Worker("numpy") as worker:
        rows = worker.call(jobs.run_case_job, fields, 3, ["accuracy", "shape"], 1, timeout_seconds=60)
        capped = worker.call(jobs.blas_thread_caps, timeout_seconds=60)
    assert capped and set(capped) == {1}
    here = checks.run_case_checks(load_backend("numpy"), fields, 3, ["accuracy", "shape"])
    assert rows == here


# -- the whole engine -------------------------------------------------------------------------

@pytest.mark.timeout(300)
def test_battery_rows_equal_the_in_process_checks():
    """run_battery's rows (worker processes, batches, lanes) are the rows check_case gives in
    this process, case by case, sorted (at n = 1 too, where two checks are skip rows on both
    paths); unclaimed cases are one skip row each."""
    req = battery.BatteryRequest(specs=("numpy", "radix2-dit"), kinds=("fft", "irfft"), dtypes=("float32", "float64"),
                                 sizes=(1, 8, 12, 64), seed=5)
    before = _spawned_workers()
    doc = battery.run_battery(req, quiet=True)
    assert _spawned_workers() <= before
    rows = doc["rows"]
    skips = [r for r in rows if r["status"] == "skip" and r["check"] == battery.SKIPPED_CASE_CHECK]
    assert {(r["backend"], r["n"]) for r in skips} == {("radix2-dit", 12)} and len(skips) == 4
    want = []
    for spec in req.specs:
        backend = load_backend(spec)
        for case in battery.build_cases(req, req.kinds):
            if backend.unsupported_reason(case) is None:
                want += [r.as_dict() for r in checks.check_case(backend, case, req.seed)]
    got = [r for r in rows if r not in skips]
    key = lambda r: (r["backend"], r["kind"], r["dtype"], r["n"], r["check"])  # noqa: E731
    assert sorted(got, key=key) == sorted(want, key=key)
    assert all(r["status"] in ("pass", "skip") for r in got), [r for r in got if r["status"] not in ("pass", "skip")]
    order = [(req.specs.index(r["backend"]), ("fft", "ifft", "rfft", "irfft").index(r["kind"]), r["dtype"], r["n"])
             for r in rows]
    assert order == sorted(order)


# -- rows to the results file -------------------------------------------------------------------

def test_row_sink_hands_every_row_to_the_writer_in_order(tmp_path):
    from fftgauge.harness.results import ResultsWriter

    doc = {"schema": "x", "rows": []}
    writer = ResultsWriter(str(tmp_path / "r.json"), doc, min_interval_seconds=0.0)
    sink = battery.RowSink(writer)
    for i in range(200):
        sink.add([{"i": i}, {"i": i + 0.5}])
    sink.close()
    assert [r["i"] for r in doc["rows"]] == [v for i in range(200) for v in (i, i + 0.5)]


def test_row_sink_raises_the_writers_error_on_close():
    class FailingWriter:
        def add(self, rows):
            raise OSError("disk full")

    sink = battery.RowSink(FailingWriter())
    sink.add([{"i": 1}])
    sink.add([{"i": 2}])
    with pytest.raises(OSError, match="disk full"):
        sink.close()


# -- one request, one row set, whichever path asks ----------------------------------------------

def test_cli_and_python_api_build_the_same_request(monkeypatch):
    """``fftgauge check`` and ``fftgauge.check()`` go through one request builder: the same
    defaults (sizes, precisions, the pure-Python references' size limit) with and without sizes."""
    import fftgauge
    from fftgauge.harness.battery.budget import DEFAULT_CASE_BUDGET_SECONDS, REFERENCE_CASE_BUDGET_SECONDS
    from fftgauge.harness.cli import build_parser
    from fftgauge.harness.cli.check import request_from_args

    seen = []
    monkeypatch.setattr(battery, "run_battery", lambda req, **kw: seen.append(req) or {"rows": []})
    parser = build_parser()
    for argv, kwargs in ((["--backend", "direct"], {}), (["--backend", "direct", "--sizes", "1..8"], {"sizes": "1..8"}),
                         (["--backend", "direct", "--dtypes", "float64", "--checks", "accuracy,shape"],
                          {"dtypes": ["float64"], "checks": "accuracy,shape"})):
        fftgauge.check(["direct"], **kwargs)
        assert seen.pop() == request_from_args(parser.parse_args(["check", *argv]))
    fftgauge.check(["direct"])
    req = seen.pop()
    assert (req.case_budget_seconds, req.reference_budget_seconds) == (DEFAULT_CASE_BUDGET_SECONDS,
                                                                       REFERENCE_CASE_BUDGET_SECONDS)
    fftgauge.check(["direct"], sizes="@pow2")
    req = seen.pop()
    assert (req.max_n_pure_python, req.reference_budget_seconds) == (None, None)


@pytest.mark.timeout(300)
def test_battery_and_check_case_give_the_same_rows_at_n_1():
    """At n = 1 (where time-shift and modulation say nothing) the battery's worker rows and
    the in-process check_case/pytest-fixture rows are the same set, skip rows included."""
    req = battery.BatteryRequest(specs=("numpy",), kinds=("fft", "rfft"), dtypes=("float64",), sizes=(1,), seed=3)
    rows = battery.run_battery(req, quiet=True)["rows"]
    want = [r.as_dict() for kind in req.kinds
            for r in checks.check_case(load_backend("numpy"), Case(kind, "float64", 1), req.seed)]
    key = lambda r: (r["kind"], r["check"], r["status"], r["message"])  # noqa: E731
    assert sorted(map(key, rows)) == sorted(map(key, want))
    assert {(r["check"], r["status"]) for r in rows if r["check"] in ("time-shift", "modulation")} == {
        ("time-shift", "skip"), ("modulation", "skip")}


# -- progress ----------------------------------------------------------------------------------

def test_progress_off_a_terminal_is_a_plain_line_every_few_seconds():
    """Written to a log (not a terminal): one line per PROGRESS_LINE_SECONDS of a fake clock,
    no carriage returns; quiet: nothing."""
    import io

    from fftgauge.harness.execution import dispatch

    now = [0.0]
    log = io.StringIO()
    progress = dispatch.Progress(total=100, quiet=False, stream=log, clock=lambda: now[0])
    for i in range(100):
        now[0] += 0.5  # 50 s in all
        progress.advance(note=f"case {i}")
    progress.close()
    lines = log.getvalue().splitlines()
    assert "\r" not in log.getvalue()
    assert len(lines) == int(50 // dispatch.PROGRESS_LINE_SECONDS)
    assert lines[0].startswith("checking: 20/100 cases (20%) after 10 s")
    quiet = io.StringIO()
    dispatch.Progress(total=3, quiet=True, stream=quiet, clock=lambda: now[0]).advance(3)
    assert quiet.getvalue() == ""


def test_an_interruption_stops_dispatch_and_kills_the_lanes_workers_without_waiting_for_them():
    """A KeyboardInterrupt in the main thread (raised here by a lane through
    _thread.interrupt_main, as a signal handler would) stops the queue, aborts every lane's
    worker and every spare worker, and drive_lanes returns it instead of waiting for the lanes."""
    import _thread

    class FakeLane:
        def __init__(self):
            self.killed = threading.Event()

        def abort(self):
            self.killed.set()

    class FakeWorker:
        aborted = False

        def abort(self):
            self.aborted = True

    lanes, spare = [FakeLane(), FakeLane()], {"s": FakeWorker()}
    queue, _ = _queue()

    def run_lane(lane):
        if lane is lanes[0]:
            _thread.interrupt_main()
        lane.killed.wait(30)  # a case in flight, until its worker is killed

    stop = battery.drive_lanes(lanes, queue, spare, run_lane)
    assert isinstance(stop, KeyboardInterrupt)
    assert queue.stopped and queue.next(None) is None
    assert all(lane.killed.is_set() for lane in lanes) and spare["s"].aborted


# -- kinds a backend never claimed ---------------------------------------------------------------

SAMPLE_ADAPTERS = __import__("pathlib").Path(__file__).parent / "data" / "sample_adapters.py"


@pytest.mark.timeout(300)
def test_a_kind_the_backend_never_claimed_makes_no_row_unless_asked_for():
    """A plain callable computes fft only: a run that names no kinds has rows of fft alone;
    one that asks for rfft gets that case's skip row saying why."""
    spec = f"{SAMPLE_ADAPTERS}:numpy_forward"
    plain = battery.run_battery(battery.BatteryRequest(specs=(spec,), kinds=None, dtypes=("float64",),
                                                       sizes=(8,), seed=2), quiet=True)["rows"]
    assert plain and {r["kind"] for r in plain} == {"fft"}
    asked = battery.run_battery(battery.BatteryRequest(specs=(spec,), kinds=("fft", "rfft"), dtypes=("float64",),
                                                       sizes=(8,), seed=2), quiet=True)["rows"]
    rfft = [r for r in asked if r["kind"] == "rfft"]
    assert [(r["status"], r["check"]) for r in rfft] == [("skip", battery.SKIPPED_CASE_CHECK)]
    assert "does not compute rfft" in rfft[0]["message"]


# -- processes a backend leaves running --------------------------------------------------------

@pytest.mark.timeout(300)
def test_a_case_whose_backend_left_processes_running_gets_an_error_row_saying_how_many():
    """tests/data/misbehaving.py's sleeper starts ``sleep`` on every call and returns the right
    transform: the case's checks pass, one ``error`` row of check ``all`` says how many
    processes it left running, and none is running after the run (counted with psutil)."""
    import re
    import time

    leftover_sleep = os.environ["FFTGAUGE_TEST_SLEEP_SECONDS"]  # tests/conftest.py; misbehaving.py sleeps it

    def sleepers() -> set[int]:
        return {p.pid for p in psutil.process_iter(["cmdline", "status"])
                if p.info["cmdline"] == ["sleep", leftover_sleep] and p.info["status"] != psutil.STATUS_ZOMBIE}

    before = sleepers()
    spec = f"{SAMPLE_ADAPTERS.parent / 'misbehaving.py'}:sleeper_fft"
    req = battery.BatteryRequest(specs=(spec,), kinds=("fft",), dtypes=("float64",), sizes=(8,), seed=4)
    rows = battery.run_battery(req, quiet=True)["rows"]
    left = [r for r in rows if r["check"] == battery.SKIPPED_CASE_CHECK]
    assert [r["status"] for r in left] == ["error"], rows
    count = int(re.fullmatch(r"the case's checks ran, but it left (\d+) process(es)? running "
                             r"\(ended with its worker\)", left[0]["message"]).group(1))
    assert count >= 1
    assert any(r["check"] == "accuracy" and r["status"] == "pass" for r in rows)
    deadline = time.monotonic() + 5
    while sleepers() - before and time.monotonic() < deadline:
        time.sleep(0.05)
    assert not sleepers() - before


@pytest.mark.timeout(300)
def test_the_battery_shares_the_default_memory_cap_between_its_lanes(monkeypatch):
    """Every worker the battery starts is told how many run at once (one per core), so the
    default cap (limits.default_memory_limit_bytes) is divided between them."""
    import os

    from fftgauge.harness.execution import worker as worker_module
    from fftgauge.harness.execution.limits import default_memory_limit_bytes

    caps = []

    class Recording(worker_module.Worker):
        def __init__(self, *args, **kwargs):
            super().__init__(*args, **kwargs)
            caps.append((kwargs.get("concurrency"), self.memory_limit_bytes))

    monkeypatch.setattr(worker_module, "Worker", Recording)
    req = battery.BatteryRequest(specs=("numpy", "radix2-dit"), kinds=("fft",), dtypes=("float64",), sizes=(8,), seed=1)
    battery.run_battery(req, quiet=True)
    parallel = max(1, os.cpu_count() or 1)
    assert caps and all(c == parallel and cap == default_memory_limit_bytes(parallel) for c, cap in caps), caps
