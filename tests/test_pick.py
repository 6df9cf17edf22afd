"""``fftgauge pick``: the workload, the ranking logic (on synthetic rows, no timing), the
answer in words, and the command on numpy, scipy and deliberately wrong backends.

Sources of the numbers checked: machine epsilon of float64 is 2^-52 and of float32 2^-23
(IEEE Std 754-2019, binary64/binary32); a ratio in decibels is 20 log10 of an amplitude
ratio (so 120 dB is 1e-6); the break-even of a plan is the planning time it costs over the
execution time it saves per call, (p_b - p_a) / (t_a - t_b), worked by hand below.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from fftgauge.harness.cli import main
from fftgauge.harness.errors import UsageError
from fftgauge.harness.selection.ranking import assess, rank
from fftgauge.harness.selection.verdict import round_up_calls, summary_sentences
from fftgauge.harness.selection.workload import build_workload, parse_accuracy

BROKEN = Path(__file__).parent / "data" / "broken_ffts.py"
EPS64 = 2.0 ** -52
EPS32 = 2.0 ** -23


# -- synthetic rows ---------------------------------------------------------------------------

def check_rows(backend, n=64, kind="fft", dtype="float64", eps_units=1.0, status="pass", diagnosis=None,
               failing_check="accuracy"):
    """Rows of a battery run on one case: accuracy plus one behaviour check."""
    eps = EPS64 if dtype == "float64" else EPS32
    acc_status = status if failing_check == "accuracy" else "pass"
    other_status = status if failing_check != "accuracy" else "pass"
    base = {"backend": backend, "kind": kind, "dtype": dtype, "n": n}
    return [
        {**base, "check": "accuracy", "status": acc_status, "value": eps_units * eps, "limit": 20 * eps,
         "eps_units": eps_units, "diagnosis": diagnosis if acc_status == "fail" else None,
         "message": f"relative rms error {eps_units} eps"},
        {**base, "check": failing_check if failing_check != "accuracy" else "repeatable", "status": other_status,
         "value": None, "limit": None, "eps_units": None,
         "diagnosis": diagnosis if other_status == "fail" else None, "message": "synthetic"},
    ]


def skip_rows(backend, n=64, kind="fft", dtype="float64"):
    return [{"backend": backend, "kind": kind, "dtype": dtype, "n": n, "check": "accuracy", "status": "skip",
             "value": None, "limit": None, "eps_units": None, "diagnosis": None,
             "message": f"{backend} does not compute {kind}"}]


def time_row(backend, seconds, plan_seconds=0.0, spread=0.02, n=64, kind="fft", dtype="float64", peak=1024):
    return {"backend": backend, "kind": kind, "dtype": dtype, "n": n, "seconds": seconds,
            "seconds_low": seconds * (1 - spread), "seconds_high": seconds * (1 + spread),
            "plan_seconds": plan_seconds, "peak_bytes": peak, "status": "ok"}


def workload(**kw):
    args = {"sizes": "64", "kinds": "fft", "dtypes": "float64"}
    args.update(kw)
    return build_workload(**args)


# -- the workload -----------------------------------------------------------------------------

def test_accuracy_in_eps_units():
    assert parse_accuracy("8").limit_eps("float64") == 8.0
    assert parse_accuracy("2.5eps").limit_eps("float32") == 2.5


@pytest.mark.parametrize("text", ["120dB", "-120dB", "120 db"])
def test_accuracy_in_decibels_is_an_error_ratio_per_precision(text):
    """120 dB = an error of 10^(-120/20) = 1e-6 of the signal; in eps units 1e-6 / 2^-52 for float64."""
    need = parse_accuracy(text)
    assert need.limit_eps("float64") == pytest.approx(1e-6 / EPS64)
    assert need.limit_eps("float32") == pytest.approx(1e-6 / EPS32)


@pytest.mark.parametrize("text", ["0", "-3", "fast", "0dB", "8 bits", ""])
def test_bad_accuracy_is_a_usage_error(text):
    with pytest.raises(UsageError, match="--accuracy"):
        parse_accuracy(text)


@pytest.mark.parametrize("kwargs, match", [
    ({"sizes": None}, "needs the workload's sizes"),
    ({"sizes": "0"}, "'0'"),
    ({"threads": 0}, "--threads"),
    ({"calls_per_plan": 0}, "--calls-per-plan"),
    ({"kinds": "dct"}, "unknown kind"),
    ({"dtypes": "q7"}, "unknown dtype"),            # q15 and q31 are taken (judged by --sqnr)
    ({"norm": "backward,ortho"}, "--norm takes one"),
])
def test_bad_workload_values_are_usage_errors(kwargs, match):
    with pytest.raises(UsageError, match=match):
        workload(**kwargs)


def test_workload_phrase():
    assert workload(sizes="4096", kinds="rfft", dtypes="float32").phrase() == "4096-point float32 rfft with 1 thread"
    assert workload(sizes="8,16", threads=2).phrase() == "2 sizes (8, 16) float64 fft with 2 threads"


# -- ranking, on synthetic rows ---------------------------------------------------------------

def ranked(w, checks, times):
    return rank(assess(b, checks.get(b, []), times.get(b, []), w) for b in checks)


def test_fastest_first_failing_and_unclaiming_never_recommended():
    w = workload()
    checks = {"slow": check_rows("slow"), "fast": check_rows("fast"),
              "wrong": check_rows("wrong", eps_units=1e15, status="fail", diagnosis="sign"),
              "absent": skip_rows("absent")}
    times = {"slow": [time_row("slow", 4e-6)], "fast": [time_row("fast", 1e-6)],
             "wrong": [time_row("wrong", 1e-7)]}          # fastest of all, and wrong
    out = ranked(w, checks, times)
    assert [(c.backend, c.rank) for c in out] == [("fast", 1), ("slow", 2), ("wrong", None), ("absent", None)]
    wrong, absent = out[2], out[3]
    assert not wrong.recommended and "accuracy (sign)" in wrong.reasons[0]
    assert not absent.recommended and "does not take fft float64 n=64" in absent.reasons[0]
    text = " ".join(summary_sentences(w, out))
    assert "wrong is not recommended" in text and "absent is not recommended" in text


def test_ratio_in_words_is_computed():
    """1.8 us against 1.0 us (both +-2%) is 1.8x, interval 1.8*0.98/1.02 to 1.8*1.02/0.98."""
    w = workload(sizes="4096", kinds="rfft", dtypes="float32")
    rows = {b: check_rows(b, n=4096, kind="rfft", dtype="float32") for b in ("x", "y")}
    times = {"x": [time_row("x", 1.0e-6, n=4096, kind="rfft", dtype="float32")],
             "y": [time_row("y", 1.8e-6, n=4096, kind="rfft", dtype="float32")]}
    first = summary_sentences(w, ranked(w, rows, times))[0]
    assert first.startswith("for 4096-point float32 rfft with 1 thread, x is 1.8x faster than y (interval 1.7x to 1.9x")
    assert "at equal accuracy" in first


def test_overlapping_intervals_are_said_to_be_equal():
    w = workload()
    rows = {b: check_rows(b) for b in ("x", "y")}
    times = {"x": [time_row("x", 1.00e-6, spread=0.1)], "y": [time_row("y", 1.05e-6, spread=0.1)]}
    assert "equally fast within the measurement" in summary_sentences(w, ranked(w, rows, times))[0]


@pytest.mark.parametrize("calls, first", [(100, "noplan"), (10_000, "planner")])
def test_planning_is_amortised_over_the_calls_per_plan(calls, first):
    """planner: 1 us per call after a 1 ms plan; noplan: 2 us, no plan. Per call with planning:
    at 100 calls 1 + 1000/100 = 11 us against 2 us; at 10,000 calls 1.1 us against 2 us."""
    w = workload(calls_per_plan=calls)
    rows = {b: check_rows(b) for b in ("planner", "noplan")}
    times = {"planner": [time_row("planner", 1e-6, plan_seconds=1e-3)], "noplan": [time_row("noplan", 2e-6)]}
    out = ranked(w, rows, times)
    assert out[0].backend == first
    planner = next(c for c in out if c.backend == "planner")
    assert planner.amortised_seconds == pytest.approx(1e-6 + 1e-3 / calls)


def test_break_even_calls_are_computed():
    """(1 ms - 0) / (2 us - 1 us) = 1,000 calls."""
    w = workload(calls_per_plan=10_000)
    rows = {b: check_rows(b) for b in ("planner", "noplan")}
    times = {"planner": [time_row("planner", 1e-6, plan_seconds=1e-3)], "noplan": [time_row("noplan", 2e-6)]}
    text = summary_sentences(w, ranked(w, rows, times))
    assert any("planner plans take 1 ms, worth it against noplan above 1,000 calls per plan" in s for s in text)


def test_a_plan_that_saves_nothing_never_pays_off():
    w = workload()
    rows = {b: check_rows(b) for b in ("planner", "noplan")}
    times = {"planner": [time_row("planner", 3e-6, plan_seconds=1e-3)], "noplan": [time_row("noplan", 2e-6)]}
    text = summary_sentences(w, ranked(w, rows, times))
    assert any("never pay off against noplan" in s for s in text)


def test_round_up_calls():
    assert [round_up_calls(c) for c in (0.2, 7, 99.5, 1234, 2000)] == [1, 7, 100, 1300, 2000]


def test_accuracy_need_excludes_a_backend_above_it():
    """A user need of 10 eps excludes a backend at 50 eps (accurate by the battery's bound)."""
    w = workload(accuracy="10")
    rows = {"loose": check_rows("loose", eps_units=50.0), "tight": check_rows("tight", eps_units=2.0)}
    times = {b: [time_row(b, s)] for b, s in (("loose", 1e-6), ("tight", 3e-6))}
    out = ranked(w, rows, times)
    assert [c.backend for c in out if c.recommended] == ["tight"]
    assert "not accurate enough at fft float64 n=64: 50 eps, above the 10 eps needed" in out[1].reasons[0]
    assert out[0].limit_eps == 10.0 and out[0].limit_source == "user"


def test_battery_limit_is_reported_in_eps_without_a_user_need():
    w = workload()
    out = ranked(w, {"x": check_rows("x")}, {"x": [time_row("x", 1e-6)]})
    assert out[0].limit_eps == pytest.approx(20.0) and out[0].limit_source == "battery"


def test_a_backend_without_a_time_is_not_recommended():
    w = workload(sizes="64,128")
    rows = {"x": check_rows("x", n=64) + check_rows("x", n=128)}
    out = ranked(w, rows, {"x": [time_row("x", 1e-6, n=64)]})
    assert not out[0].recommended and "has no time for fft float64 n=128" in out[0].reasons[0]
    assert summary_sentences(w, out)[0].startswith("no backend can be recommended")


def test_behaviour_failure_alone_excludes():
    w = workload()
    rows = {"racy": check_rows("racy", status="fail", diagnosis="thread-unsafe", failing_check="concurrent")}
    out = ranked(w, rows, {"racy": [time_row("racy", 1e-6)]})
    assert not out[0].recommended and "concurrent (thread-unsafe)" in out[0].failed_checks[0]


# -- the command --------------------------------------------------------------------------------

QUICK = ["--samples", "10", "--rounds", "2", "--budget", "0.02", "--quiet", "--pin-cpu", "off"]


def test_pick_on_numpy_scipy_and_wrong_backends(tmp_path, capsys):
    """numpy and scipy are ranked; the opposite-sign FFT and the float32-inside FFT never are,
    with the battery's diagnosis in the reason; the JSON is fftgauge-pick/1."""
    out = tmp_path / "pick.json"
    code = main(["pick", "--sizes", "16,64", "--backend", "numpy", "--backend", "scipy",
                 "--backend", f"{BROKEN}:opposite_sign_fft", "--backend", f"{BROKEN}:float32_fft",
                 "--json", str(out), *QUICK])
    assert code == 0
    text = capsys.readouterr().out
    doc = json.loads(out.read_text())
    assert doc["schema"] == "fftgauge-pick/1" and doc["workload"]["sizes"] == [16, 64]
    rows = {r["backend"]: r for r in doc["rows"]}
    why = {b: r["reasons"] for b, r in rows.items()}
    assert doc["recommended"] in ("numpy", "scipy"), why
    assert {rows["numpy"]["rank"], rows["scipy"]["rank"]} == {1, 2}, why
    sign, single = rows["broken_ffts:opposite_sign_fft"], rows["broken_ffts:float32_fft"]
    assert sign["rank"] is None and not sign["recommended"] and "(sign)" in sign["failed_checks"][0]
    assert single["rank"] is None and "(precision)" in single["failed_checks"][0]
    assert "broken_ffts:opposite_sign_fft is not recommended" in text
    assert doc["evidence"]["check"]["schema"] == "fftgauge-check/1"
    assert doc["evidence"]["time"]["schema"] == "fftgauge-time/1"
    timed = {r["backend"] for r in doc["evidence"]["time"]["rows"]}
    assert timed == {"numpy", "scipy"}                       # the wrong ones are not timed


def test_pick_exits_1_when_no_backend_claims_the_workload(capsys):
    code = main(["pick", "--sizes", "16", "--kinds", "rfft", "--backend", f"{BROKEN}:opposite_sign_fft", *QUICK])
    assert code == 1
    text = capsys.readouterr().out
    assert "no backend can be recommended" in text and "does not compute rfft" in text


@pytest.mark.parametrize("argv, words", [
    (["--sizes", "0"], "'0'"),
    (["--sizes", "8", "--accuracy", "fast"], "--accuracy"),
    (["--sizes", "8", "--calls-per-plan", "-1"], "--calls-per-plan"),
    (["--sizes", "8", "--samples", "2"], "--samples"),
    ([], "sizes"),
    (["--sizes", "8", "--backend", "no_such_backend_name"], "unknown backend"),
])
def test_bad_input_is_exit_2_with_one_line(argv, words, capsys):
    assert main(["pick", *argv, "--quiet"]) == 2
    err = capsys.readouterr().err
    assert words in err and len(err.strip().splitlines()) == 1 and "Traceback" not in err
