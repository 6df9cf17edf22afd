"""The user's own pass criteria (``--limit``, ``--limits``): parsing, conversion, judging rows,
the summary's notes, and whole runs.

Sources: the machine epsilons are numpy.finfo's (IEEE 754 binary16/32/64: 2^-10, 2^-23,
2^-52); the decibel conversion is the definition 20 log10(relative rms error); the absolute
conversion rests on Parseval's theorem (sum |X|^2 = c^2 N sum |x|^2, Oppenheim & Schafer,
3rd ed., Table 8.2), checked here numerically against numpy.fft with each norm. The runs'
figures (numpy's float64 error above 1 eps at n = 65536; the float16 routine's error near
7e-4 at n <= 64) were measured with ``fftgauge check`` before these tests asserted them.
"""

from __future__ import annotations

import json
import math
import os

import numpy as np
import pytest

from fftgauge.harness.battery.criteria import (
    Limit, USER_LIMIT_CODE, apply_limits, build_limits, judge_row, limit_for, limit_notes, parse_limit_option,
)
from fftgauge.harness.cli import main
from fftgauge.harness.errors import UsageError

HERE = os.path.dirname(os.path.abspath(__file__))
HALF_FFT = os.path.join(HERE, "data", "half_precision_fft.py") + ":fft"


# -- parsing ---------------------------------------------------------------------------------------

@pytest.mark.parametrize("item, check, amount, unit", [
    ("accuracy=8eps", "accuracy", 8.0, "eps"),
    ("accuracy=8 eps", "accuracy", 8.0, "eps"),
    ("linearity=1e-3rel", "linearity", 1e-3, "relative"),
    ("parseval=2.5e-4 relative", "parseval", 2.5e-4, "relative"),
    ("accuracy=-90dB", "accuracy", -90.0, "dB"),
    ("-90 db", "all", -90.0, "dB"),
    ("16eps", "all", 16.0, "eps"),
    ("all=0eps", "all", 0.0, "eps"),
])
def test_criteria_parse(item, check, amount, unit):
    lim = parse_limit_option(item)
    assert (lim.check, lim.amount, lim.unit) == (check, amount, unit)


def test_eps_is_the_precisions_machine_epsilon():
    # numpy.finfo: the IEEE 754 epsilons 2^-23 and 2^-52.
    lim = parse_limit_option("accuracy=8eps")
    assert lim.relative_limit("float64", 1024, "backward", "fft") == 8 * np.finfo(np.float64).eps == 8 * 2.0**-52
    assert lim.relative_limit("float32", 1024, "backward", "fft") == 8 * np.finfo(np.float32).eps == 8 * 2.0**-23


def test_decibels_are_20_log10_of_the_relative_error():
    rel = parse_limit_option("accuracy=-90dB").relative_limit("float64", 64, "backward", "fft")
    assert math.isclose(20 * math.log10(rel), -90.0, rel_tol=1e-12)
    assert math.isclose(rel, 3.1622776601683795e-05, rel_tol=1e-12)  # 10^-4.5


@pytest.mark.parametrize("kind, norm", [("fft", "backward"), ("fft", "ortho"), ("fft", "forward"),
                                        ("ifft", "backward"), ("ifft", "ortho"), ("ifft", "forward")])
def test_absolute_limit_follows_parseval(kind, norm):
    """An absolute rms error a at input rms S is the relative error a / rms(X) with rms(X) measured
    on numpy.fft's output for an input of rms S (Parseval: rms(X) = |c| sqrt(N) S)."""
    n, s, a = 1024, 0.5, 1e-6
    rng = np.random.default_rng(7)
    x = rng.standard_normal(n) + 1j * rng.standard_normal(n)
    x *= s / np.sqrt(np.mean(np.abs(x) ** 2))
    out = (np.fft.fft if kind == "fft" else np.fft.ifft)(x, norm=norm)
    measured = a / np.sqrt(np.mean(np.abs(out) ** 2))
    lim = parse_limit_option(f"accuracy=1e-6abs@{s}")
    assert math.isclose(lim.relative_limit("float64", n, norm, kind), measured, rel_tol=1e-9)


def test_limit_for_prefers_a_checks_own_limit():
    limits = build_limits(["1e-3rel", "accuracy=8eps"])
    assert limit_for(limits, "accuracy").unit == "eps"
    assert limit_for(limits, "linearity").unit == "relative"
    assert limit_for(limits, "shape") is None  # not a value check: all does not reach it


def test_command_line_limit_replaces_the_files(tmp_path):
    path = tmp_path / "limits.toml"
    path.write_text('[limits]\naccuracy = "1 eps"\nall = "-60 dB"\n')
    limits = {lim.check: lim for lim in build_limits(["accuracy=4eps"], str(path))}
    assert (limits["accuracy"].amount, limits["accuracy"].origin) == (4.0, "--limit")
    assert (limits["all"].unit, limits["all"].origin) == ("dB", str(path))


def test_python_api_mapping():
    (lim,) = build_limits({"accuracy": "8 eps"})
    assert (lim.check, lim.amount, lim.unit) == ("accuracy", 8.0, "eps")


# -- bad input: exit 2, one line naming the item ----------------------------------------------------

@pytest.mark.parametrize("item, words", [
    ("accuracy=8", "has no unit"),
    ("accuracy=8ulp", "unknown unit 'ulp'"),
    ("accuracy=-1eps", "cannot be negative"),
    ("accuracy=-1e-3rel", "cannot be negative"),
    ("accuracy=1e-6abs", "needs the input scale"),
    ("accuracy=1e-6abs@0", "positive rms"),
    ("linearity=1e-6abs@1", "applies to accuracy only"),
    ("accuracy=8eps@2", "only an absolute limit"),
    ("acuracy=8eps", "unknown check 'acuracy' (did you mean accuracy?)"),
    ("shape=1eps", "the shape check takes no limit"),
    ("accuracy=eight eps", "is not a criterion"),
])
def test_bad_limit_exits_2_with_one_line(item, words, capsys):
    assert main(["check", "--backend", "numpy", "--sizes", "8", f"--limit={item}"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "Traceback" not in err
    assert words in err and item.partition("=")[0] in err


@pytest.mark.parametrize("text, words", [
    ('[limits\naccuracy = "8 eps"\n', "does not parse as TOML"),
    ('[limits]\nacuracy = "8 eps"\n', "unknown check 'acuracy'"),
    ('[limits]\naccuracy = 8\n', "write the limit as a string"),
    ('[limits]\naccuracy = "8"\n', "has no unit"),
    ('accuracy = "8 eps"\n', "unknown key 'accuracy'"),
    ('[limit]\naccuracy = "8 eps"\n', "unknown key 'limit'"),
    ('', "no [limits] table"),
])
def test_bad_limits_file_exits_2_with_one_line(tmp_path, text, words, capsys):
    path = tmp_path / "limits.toml"
    path.write_text(text)
    assert main(["check", "--backend", "numpy", "--sizes", "8", "--limits", str(path)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "Traceback" not in err
    assert words in err and str(path) in err


def test_missing_limits_file_exits_2(tmp_path, capsys):
    assert main(["check", "--backend", "numpy", "--limits", str(tmp_path / "none.toml")]) == 2
    assert "cannot read the limits file" in capsys.readouterr().err


# -- judging rows --------------------------------------------------------------------------------

def _row(status="pass", value=1.0e-15, limit=1.0e-14, check="accuracy", diagnosis=None):
    return {"backend": "b", "kind": "fft", "dtype": "float64", "n": 1024, "norm": "backward", "check": check,
            "status": status, "value": value, "limit": limit, "eps_units": value and value / 2.0**-52,
            "diagnosis": diagnosis, "message": "m", "limit_source": "bound"}


def test_stricter_limit_fails_a_row_within_the_bound():
    out = judge_row(_row(value=1e-15), parse_limit_option("accuracy=1eps"))
    assert (out["status"], out["diagnosis"], out["limit_source"]) == ("fail", USER_LIMIT_CODE, "user")
    assert out["limit"] == 2.0**-52 and out["bound_limit"] == 1e-14 and out["value"] == 1e-15
    assert "within the built-in bound" in out["message"]


def test_looser_limit_passes_a_failing_row_and_keeps_the_bounds_diagnosis():
    out = judge_row(_row(status="fail", value=1e-7, diagnosis="precision"), parse_limit_option("accuracy=1e-3rel"))
    assert (out["status"], out["diagnosis"], out["bound_diagnosis"]) == ("pass", None, "precision")
    assert "not the built-in bound" in out["message"]


def test_rows_without_a_limit_are_left_alone():
    lim = parse_limit_option("1e-3rel")
    shape_fail = _row(status="fail", value=None, limit=None, diagnosis="shape")
    shape_fail["limit_source"] = None
    skip = {**_row(status="skip", value=None, limit=None), "limit_source": None}
    error = {**_row(status="error", value=None, limit=None), "limit_source": None}
    assert apply_limits([shape_fail, skip, error], [lim]) == [shape_fail, skip, error]
    nonfinite = _row(status="fail", value=None, diagnosis="nonfinite")
    assert judge_row(nonfinite, lim)["status"] == "fail"  # no value: no limit passes it


def test_notes_say_a_looser_limit_hides_bugs():
    lim = parse_limit_option("accuracy=1e-3rel")
    rows = apply_limits([_row(status="fail", value=1e-7, diagnosis="precision")], [lim])
    notes = limit_notes(rows, {"accuracy": lim.as_dict()})
    assert notes[0].startswith("limit for accuracy is 0.001 relative, looser than the built-in bound by 1e+11 x")
    assert "a bug below it would not be caught" in notes[0]
    assert "pass only under the user's limit" in notes[1] and "precision" in notes[1]


def test_notes_say_a_stricter_limit_may_fail_correct_code():
    lim = parse_limit_option("accuracy=1eps")
    rows = apply_limits([_row(value=1e-16)], [lim])
    (note,) = limit_notes(rows, {"accuracy": lim.as_dict()})
    assert "stricter than the built-in bound" in note and "a correct implementation may fail it" in note


# -- whole runs ------------------------------------------------------------------------------------

def _rows(path):
    with open(path, encoding="utf-8") as fh:
        return json.load(fh)


def test_relative_limit_passes_a_float16_routine_and_says_it_is_looser(tmp_path, capsys):
    """The float16 routine's error (about 7e-4 at n <= 64, measured) fails every float64 bound
    and passes a limit of 1e-3 relative error on every value check; the summary says the limit
    is looser than the built-in bound."""
    base = ["check", "--backend", HALF_FFT, "--sizes", "2^3..2^6", "--kinds", "fft", "--dtypes", "float64",
            "--quiet"]
    assert main(base + ["--json", str(tmp_path / "bound.json")]) == 1
    bound = _rows(tmp_path / "bound.json")
    acc = [r for r in bound["rows"] if r["check"] == "accuracy"]
    assert acc and all(r["status"] == "fail" and r["limit_source"] == "bound" for r in acc)
    capsys.readouterr()

    assert main(base + ["--json", str(tmp_path / "user.json"), "--limit=1e-3rel"]) == 0
    out = capsys.readouterr().out
    assert "limit for every value check is 0.001 relative, looser than the built-in bound by" in out
    assert "a bug below it would not be caught" in out and "pass only under the user's limit" in out
    doc = _rows(tmp_path / "user.json")
    assert doc["request"]["limits"]["all"]["criterion"] == "0.001 relative"
    acc = [r for r in doc["rows"] if r["check"] == "accuracy"]
    assert all(r["status"] == "pass" and r["limit_source"] == "user" and r["limit"] == 1e-3 for r in acc)
    assert all(r["bound_limit"] < 1e-13 < 5e-5 < r["value"] < 1e-3 for r in acc)


def test_one_eps_fails_numpy_at_large_n(tmp_path, capsys):
    """numpy's float64 fft has a relative rms error of about 1.4 eps at n = 65536 (measured):
    within the built-in bound (about 53 eps), above a limit of 1 eps."""
    base = ["check", "--backend", "numpy", "--sizes", "65536", "--kinds", "fft", "--dtypes", "float64",
            "--checks", "accuracy", "--quiet"]
    assert main(base + ["--json", str(tmp_path / "bound.json")]) == 0
    (row,) = _rows(tmp_path / "bound.json")["rows"]
    assert row["status"] == "pass" and row["eps_units"] > 1.0
    capsys.readouterr()
    assert main(base + ["--json", str(tmp_path / "user.json"), "--limit", "accuracy=1eps"]) == 1
    (row,) = _rows(tmp_path / "user.json")["rows"]
    assert (row["status"], row["diagnosis"], row["limit_source"]) == ("fail", USER_LIMIT_CODE, "user")
    assert row["limit"] == np.finfo(np.float64).eps < row["value"] < row["bound_limit"]
    assert "stricter than the built-in bound" in capsys.readouterr().out


def test_limits_file_in_a_run(tmp_path):
    path = tmp_path / "limits.toml"
    path.write_text('# product spec\n[limits]\naccuracy = "-200 dB"\n')
    out = tmp_path / "run.json"
    assert main(["check", "--backend", "numpy", "--sizes", "16", "--kinds", "fft", "--dtypes", "float64",
                 "--checks", "accuracy,linearity", "--quiet", "--limits", str(path), "--json", str(out)]) == 0
    rows = {r["check"]: r for r in _rows(out)["rows"]}
    assert rows["accuracy"]["limit_source"] == "user" and rows["accuracy"]["limit"] == pytest.approx(1e-10)
    assert rows["linearity"]["limit_source"] == "bound" and rows["linearity"]["status"] == "pass"
    assert _rows(out)["request"]["limits"]["accuracy"]["from"] == str(path)


def test_limit_is_a_dataclass_of_the_criterion():
    assert Limit("accuracy", 1e-6, "absolute", 0.5).describe() == "1e-06 absolute rms at input rms 0.5"
    with pytest.raises(UsageError):
        build_limits(["accuracy=8"])


def test_python_api_takes_limits():
    import fftgauge

    df = fftgauge.check(["numpy"], sizes="16", kinds=["fft"], dtypes=["float64"], checks=["accuracy", "shape"],
                        limits={"accuracy": "1e-3 rel"})
    by_check = df.set_index("check")
    assert by_check.loc["accuracy", "limit_source"] == "user" and by_check.loc["accuracy", "limit"] == 1e-3
    assert by_check.loc["shape", "limit_source"] == "bound"
    with pytest.raises(UsageError, match="has no unit"):
        fftgauge.check(["numpy"], sizes="16", limits=["accuracy=8"])


def test_absolute_limit_uses_a_declared_scale():
    """A backend declaring forward_scale 1/n: its outputs' rms is sqrt(N)/N times the inputs'
    (Parseval with c = 1/N, checked on numpy.fft with norm="forward", which scales by 1/N)."""
    from fftgauge.backends.claims import Conventions

    n, s, a = 256, 1.0, 1e-9
    x = np.random.default_rng(3).standard_normal(n) + 0j
    x *= s / np.sqrt(np.mean(np.abs(x) ** 2))
    measured = a / np.sqrt(np.mean(np.abs(np.fft.fft(x, norm="forward")) ** 2))
    lim = parse_limit_option(f"accuracy={a}abs@{s}")
    row = {**_row(value=1e-16), "n": n}
    judged = judge_row(row, lim, Conventions(forward_scale="1/n"))
    assert math.isclose(judged["limit"], measured, rel_tol=1e-9)
    assert math.isclose(judge_row(row, lim)["limit"], measured / n, rel_tol=1e-9)  # numpy's backward: no 1/N
