"""``fftgauge pick`` on fixed-point workloads: the SQNR requirement (``--sqnr``, ``--sqnr-level``),
the ranking it gives on synthetic rows, the command on Q15 FFTs written for the tests
(tests/data/pick_fixed_ffts.py) and on the built-in radix-2, bad values, and the report's
pick section.

Sources of the numbers checked: an ideal b-bit quantiser gives a full-scale sine an SQNR of
6.02 b + 1.76 dB (common practice; 98.08 dB for 16 bits), so one bit is 6.02 dB =
20 log10 2; rounding once to a grid of step q adds an error of variance q**2 / 12 per real
part (the uniform model of rounding noise, common practice), so an output rounded once to
Q15 has SQNR = 10 log10(mean |X/N|**2 / (2/12)) in LSB units; shortfalls are worked by hand.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest

from fftgauge.harness.cli import main
from fftgauge.harness.errors import UsageError
from fftgauge.harness.fixed.formats import FORMATS
from fftgauge.harness.fixed.measure import NOISE_DRAWS
from fftgauge.harness.fixed.metrics import ideal_sqnr_db
from fftgauge.harness.fixed.signals import test_signal as fixed_test_signal
from fftgauge.harness.report.pick_section import pick_blocks, workload_text
from fftgauge.harness.selection.ranking import assess, rank
from fftgauge.harness.selection.run import PickSettings, pick_document
from fftgauge.harness.selection.table import SQNR_COLUMN, ranking_table
from fftgauge.harness.selection.verdict import summary_sentences
from fftgauge.harness.selection.workload import build_workload, parse_sqnr

FFTS = Path(__file__).parent / "data" / "pick_fixed_ffts.py"
QUICK = ["--samples", "10", "--rounds", "2", "--budget", "0.02", "--quiet", "--pin-cpu", "off"]
#: The SQNR of an ideal 16-bit quantiser on a full-scale sine (6.02 b + 1.76 dB, common practice).
IDEAL_16_BIT_DB = 6.02 * 16 + 1.76


# -- the requirement ----------------------------------------------------------------------------

def test_the_ideal_quantiser_formula():
    """6.02 b + 1.76 dB (common practice): 6.02 is 20 log10 2 (one bit), 1.76 is 10 log10(3/2)
    (a full-scale sine's power over that of a uniform error of one LSB), to 0.01 dB."""
    assert abs(20 * math.log10(2) - 6.02) < 0.01 and abs(10 * math.log10(1.5) - 1.76) < 0.01
    assert abs(ideal_sqnr_db(16) - IDEAL_16_BIT_DB) < 1e-9 and abs(IDEAL_16_BIT_DB - 98.08) < 1e-9


def test_sqnr_values_and_levels():
    assert (parse_sqnr("60").db, parse_sqnr("60").level_dbfs) == (60.0, 0.0)
    need = parse_sqnr("52.5dB", "-6dBFS")
    assert (need.db, need.level_dbfs, need.level_key) == (52.5, -6.0, "-6")
    assert parse_sqnr("60", "-40").phrase() == "SQNR of at least 60 dB at -40 dBFS"


@pytest.mark.parametrize("sqnr, level, match", [
    ("-3", None, "positive"), ("0", None, "positive"), ("abc", None, "--sqnr takes"), ("inf", None, "--sqnr takes"),
    ("60", "-7", "--sqnr-level takes one of"), ("60", "loud", "--sqnr-level takes one of"),
])
def test_bad_sqnr_values_are_usage_errors(sqnr, level, match):
    with pytest.raises(UsageError, match=match):
        parse_sqnr(sqnr, level)


@pytest.mark.parametrize("kwargs, match", [
    ({"dtypes": "float64", "sqnr": "60"}, "--sqnr applies to fixed-point precisions"),
    ({"dtypes": "float32,float64", "sqnr": "60"}, "--sqnr applies to fixed-point precisions"),
    ({"dtypes": "q15", "sqnr_level": "-6"}, "give --sqnr too"),
    ({"dtypes": "q15", "accuracy": "8"}, "use --sqnr"),
])
def test_requirements_that_do_not_fit_the_precisions(kwargs, match):
    with pytest.raises(UsageError, match=match):
        build_workload("1024", **kwargs)


def test_mixed_workload_takes_both_requirements():
    w = build_workload("1024", dtypes="float32,q15", accuracy="8", sqnr="60")
    assert w.fixed_dtypes == ("q15",) and w.accuracy.eps_units == 8 and w.sqnr.db == 60
    assert w.as_dict()["sqnr_db"] == 60 and w.as_dict()["sqnr_level_dbfs"] == 0.0
    assert "needing an SQNR of at least 60 dB at 0 dBFS" in w.phrase()


# -- the ranking, on synthetic rows -------------------------------------------------------------

def fixed_rows(backend, n=1024, by_level=None, status="pass", dtype="q15"):
    """Rows of the fixed-point battery on one case: sqnr (with its SQNR per noise level) and overflow."""
    base = {"backend": backend, "kind": "fft", "dtype": dtype, "n": n, "eps_units": None}
    return [{**base, "check": "sqnr", "status": status, "value": 2.0 if status == "fail" else 0.1, "limit": 1.0,
             "diagnosis": "precision" if status == "fail" else None, "message": "synthetic",
             "noise_sqnr_db": by_level or {"0": 70.0, "-6": 64.0, "-20": 50.0, "-40": 30.0}},
            {**base, "check": "overflow", "status": "pass", "value": 0.0, "limit": 0.0, "diagnosis": None,
             "message": "synthetic"}]


def time_row(backend, seconds, n=1024, dtype="q15"):
    return {"backend": backend, "kind": "fft", "dtype": dtype, "n": n, "seconds": seconds,
            "seconds_low": seconds * 0.98, "seconds_high": seconds * 1.02, "plan_seconds": 0.0,
            "peak_bytes": 4096, "status": "ok"}


def test_a_backend_below_the_need_is_refused_with_its_shortfall():
    """60 dB needed at 0 dBFS: 52.3 dB misses by 60 - 52.3 = 7.7 dB (by hand); the faster
    backend is refused, the slower one that reaches 71 dB is recommended."""
    w = build_workload("1024", dtypes="q15", sqnr="60")
    fast = assess("fast", fixed_rows("fast", by_level={"0": 52.3, "-6": 46.0}), [time_row("fast", 1e-5)], w)
    good = assess("good", fixed_rows("good", by_level={"0": 71.0, "-6": 65.0}), [time_row("good", 3e-5)], w)
    ranked = rank([fast, good])
    assert [c.backend for c in ranked] == ["good", "fast"] and ranked[0].rank == 1 and not ranked[1].recommended
    assert ranked[1].reasons == ("does not reach the SQNR needed at fft q15 n=1024: 52.3 dB at 0 dBFS, "
                                 "7.7 dB short of 60 dB",)
    assert (ranked[0].worst_sqnr_db, ranked[0].sqnr_need_db, ranked[0].sqnr_level_dbfs) == (71.0, 60.0, 0.0)
    words = " ".join(summary_sentences(w, ranked))
    assert "fast is not recommended: it does not reach the SQNR needed" in words and "7.7 dB short" in words
    table = ranking_table(ranked)
    assert SQNR_COLUMN in table and "71.0 dB (60)" in table and "52.3 dB (60)" in table


def test_the_level_chooses_which_sqnr_is_held():
    """At -6 dBFS the same rows give 46.0 dB: 60 - 46 = 14 dB short; a row without that
    level is a reason of its own; an exact output (null in a results file) meets any need."""
    w = build_workload("1024", dtypes="q15", sqnr="60", sqnr_level="-6")
    low = assess("low", fixed_rows("low", by_level={"0": 71.0, "-6": 46.0}), [time_row("low", 1e-5)], w)
    assert low.reasons == ("does not reach the SQNR needed at fft q15 n=1024: 46.0 dB at -6 dBFS, "
                           "14.0 dB short of 60 dB",)
    gap = assess("gap", fixed_rows("gap", by_level={"0": 71.0}), [time_row("gap", 1e-5)], w)
    assert gap.reasons == ("does not reach the SQNR needed at fft q15 n=1024: no SQNR measured at -6 dBFS",)
    exact = assess("exact", fixed_rows("exact", by_level={"0": None, "-6": None}), [time_row("exact", 1e-5)], w)
    assert exact.recommended and exact.worst_sqnr_db == math.inf


def test_the_need_takes_the_place_of_the_sqnr_checks_comparison():
    """A backend 2 dB below the textbook radix-2 (the sqnr row fails) is refused without --sqnr
    and recommended with a need it meets; a failing overflow check refuses it either way."""
    rows = fixed_rows("other", status="fail")
    plain = assess("other", rows, [time_row("other", 1e-5)], build_workload("1024", dtypes="q15"))
    assert not plain.recommended and plain.failed_checks[0].startswith("sqnr (precision)")
    assert plain.worst_sqnr_db == 70.0 and plain.sqnr_need_db is None
    needed = assess("other", rows, [time_row("other", 1e-5)], build_workload("1024", dtypes="q15", sqnr="60"))
    assert needed.recommended and not needed.failed_checks
    rows[1] = {**rows[1], "status": "fail", "diagnosis": "overflow"}
    wraps = assess("other", rows, [time_row("other", 1e-5)], build_workload("1024", dtypes="q15", sqnr="60"))
    assert not wraps.recommended and wraps.failed_checks[0].startswith("overflow (overflow)")


def test_an_unclaimed_fixed_case_is_named():
    """A skipped sqnr row (the backend does not take q31) is a 'does not take' reason."""
    w = build_workload("1024", dtypes="q31", sqnr="60")
    skip = [{"backend": "b", "kind": "fft", "dtype": "q31", "n": 1024, "check": "sqnr", "status": "skip",
             "message": "b does not compute q31"}]
    assert assess("b", skip, [], w).reasons == ("does not take fft q31 n=1024: b does not compute q31",)


# -- the report's pick section ------------------------------------------------------------------

def test_report_section_shows_the_requirement():
    w = build_workload("1024", dtypes="q15", sqnr="60", sqnr_level="-6")
    check = {"rows": fixed_rows("a", by_level={"-6": 52.3}) + fixed_rows("b", by_level={"-6": 65.0}),
             "backends": {}}
    doc = pick_document(w, ["a", "b"], PickSettings(), check, {"rows": [time_row("b", 1e-5)]})
    text = workload_text(doc["workload"])
    assert "SQNR needed: at least 60 dB on noise at -6 dBFS" in text
    tables = [b for b in pick_blocks([("p.json", doc)]) if b[0] == "table"]
    head, body = tables[0][1], tables[0][2]
    assert SQNR_COLUMN in head and body[0][head.index(SQNR_COLUMN)] == "65.0 dB (60)"
    reasons = [b for b in pick_blocks([("p.json", doc)]) if b[0] == "ul"][-1][1]
    assert "a: does not reach the SQNR needed at fft q15 n=1024: 52.3 dB at -6 dBFS, 7.7 dB short of 60 dB" in reasons
    float_doc = pick_document(build_workload("64"), [], PickSettings(), {"rows": []}, {"rows": []})
    assert "SQNR needed" not in workload_text(float_doc["workload"])


# -- the command --------------------------------------------------------------------------------

def predicted_rounded_sqnr_db(n: int, level_dbfs: float, seed: int) -> float:
    """Return the SQNR of the exact DFT / N rounded once to Q15 on the sqnr check's noise at
    ``level_dbfs`` (its draws pooled): 10 log10(sum |X/N|**2 / (count * 2/12)), the uniform model."""
    fmt = FORMATS["q15"]
    power, count = 0.0, 0
    for draw in range(NOISE_DRAWS):
        x = fixed_test_signal("noise", n, level_dbfs, fmt, seed + draw).astype(np.float64)
        y = np.fft.fft(x[:, 0] + 1j * x[:, 1]) / n
        power += float(np.sum(np.abs(y) ** 2))
        count += n
    return 10 * math.log10(power / (count * 2 / 12))


@pytest.mark.slow
def test_pick_ranks_what_meets_the_need_and_says_by_how_much_the_rest_missed(tmp_path, capsys):
    """At n = 64 and -6 dBFS: the once-rounded FFT's SQNR is the uniform model's within
    0.5 dB, its twin with one bit fewer is 6.02 dB lower within 0.5 dB; a need halfway between
    their predictions ranks the first and refuses the twin by need - its SQNR."""
    seed, n = 1234, 64
    predicted = predicted_rounded_sqnr_db(n, -6.0, seed)
    need = round(predicted - 6.02 / 2, 1)
    out = tmp_path / "pick.json"
    code = main(["pick", "--backend", f"{FFTS}:RoundedQ15", "--backend", f"{FFTS}:CoarseQ15", "--dtypes", "q15",
                 "--sizes", str(n), "--sqnr", str(need), "--sqnr-level", "-6", "--seed", str(seed),
                 "--json", str(out), *QUICK])
    text = capsys.readouterr().out
    assert code == 0, text
    doc = json.loads(out.read_text())
    rows = {r["backend"]: r for r in doc["rows"]}
    fine, coarse = rows["rounded-q15"], rows["coarse-q15"]
    assert abs(fine["worst_sqnr_db"] - predicted) < 0.5, (fine["worst_sqnr_db"], predicted)
    assert abs((fine["worst_sqnr_db"] - coarse["worst_sqnr_db"]) - 6.02) < 0.5
    assert doc["recommended"] == "rounded-q15" and fine["rank"] == 1 and coarse["rank"] is None
    short = need - coarse["worst_sqnr_db"]
    assert coarse["reasons"] == [f"does not reach the SQNR needed at fft q15 n={n}: {coarse['worst_sqnr_db']:.1f} dB "
                                 f"at -6 dBFS, {short:.1f} dB short of {need:g} dB"]
    assert f"{short:.1f} dB short" in text and doc["workload"]["sqnr_db"] == need
    timed = {r["backend"] for r in doc["evidence"]["time"]["rows"]}
    assert timed == {"rounded-q15"}            # the refused one is not timed


@pytest.mark.slow
def test_no_q15_fft_reaches_the_ideal_16_bit_quantiser(capsys):
    """The built-in Q15 radix-2 (1/2 per stage) at n = 16 and 256 against 98.08 dB (an ideal
    16-bit quantiser on a full-scale sine): refused at both sizes, each shortfall positive, and
    nothing recommended (exit 1)."""
    code = main(["pick", "--backend", "radix2-fixed", "--dtypes", "q15", "--sizes", "16,256",
                 "--sqnr", f"{IDEAL_16_BIT_DB:.2f}", *QUICK])
    text = capsys.readouterr().out
    assert code == 1 and "no backend can be recommended" in text
    assert "n=16:" in text and "n=256:" in text and "short of 98.08 dB" in text


@pytest.mark.parametrize("argv, words", [
    (["--dtypes", "q15", "--sqnr", "-3"], "--sqnr must be a positive"),
    (["--dtypes", "q15", "--sqnr", "lots"], "--sqnr takes"),
    (["--dtypes", "float64", "--sqnr", "60"], "--sqnr applies to fixed-point"),
    (["--sqnr", "60"], "--sqnr applies to fixed-point"),
    (["--dtypes", "q15", "--sqnr", "60", "--sqnr-level", "-3"], "--sqnr-level"),
    (["--dtypes", "q15", "--sqnr-level", "-6"], "--sqnr-level"),
])
def test_bad_sqnr_on_the_command_line_is_exit_2_with_one_line(argv, words, capsys):
    assert main(["pick", "--sizes", "64", "--backend", "radix2-fixed", *argv, "--quiet"]) == 2
    err = capsys.readouterr().err
    assert words in err and len(err.strip().splitlines()) == 1 and "Traceback" not in err
