"""``fftgauge check --shapes`` end to end: shaped cases in worker processes, rows with their
shape in the results file, the summary by shape, isolation, skips, bad input.

The broken FFTs are tests/data/shaped_bugs.py (loaded by the workers from their SPEC); what
each must be caught as is stated in tests/test_shapes_checks.py, where the checks' formulas are
verified against the N-D DFT's definition in mpmath.
"""

from __future__ import annotations

import json
import os

import pytest

from fftgauge.harness.cli import main
from fftgauge.harness.results import load_results

HERE = os.path.dirname(os.path.abspath(__file__))
BUGS = os.path.join(HERE, "data", "shaped_bugs.py")


def check(tmp_path, *args: str) -> tuple[int, dict]:
    path = str(tmp_path / "run.json")
    code = main(["check", "--quiet", "--json", path, *args])
    with open(path, encoding="utf-8") as fh:
        return code, json.load(fh)


def test_numpy_and_a_leaky_batch(tmp_path, capsys):
    code, doc = check(tmp_path, "--backend", "numpy", "--backend", f"{BUGS}:Leaky", "--shapes",
                      "32x64 along -1, 6x8", "--kinds", "fft", "--dtypes", "float64")
    out = capsys.readouterr().out
    assert code == 1
    numpy_rows = [r for r in doc["rows"] if r["backend"] == "numpy"]
    assert numpy_rows and all(r["status"] in ("pass", "skip") for r in numpy_rows)
    assert {(tuple(r["shape"]), r["kind"]) for r in numpy_rows} == {((32, 64), "fft"), ((6, 8), "fftn")}
    row = next(r for r in doc["rows"] if r["backend"] == "leaky" and r["check"] == "batch-independence"
               and r["shape"] == [32, 64])
    assert (row["status"], row["diagnosis"], row["axes"], row["layout"], row["batch"], row["points"], row["n"]) == \
        ("fail", "batch-leak", [-1], "C", 32, 64, 64)
    assert "FAIL (shapes)" in out and "32x64 axes=-1 C" in out and "batch-leak" in out
    assert doc["request"]["shapes"] == ["32x64 along -1", "6x8"]
    assert doc["complete"] is True


def test_layouts_option_makes_cases_per_layout(tmp_path):
    code, doc = check(tmp_path, "--backend", f"{BUGS}:FortranBug", "--shapes", "12x20", "--kinds", "fftn",
                      "--dtypes", "float64", "--layouts", "C,F")
    assert code == 1
    acc = {r["layout"]: r for r in doc["rows"] if r["check"] == "accuracy"}
    assert acc["C"]["status"] == "pass"
    assert (acc["F"]["status"], acc["F"]["diagnosis"]) == ("fail", "layout")


def test_a_crashing_backend_gives_error_rows_and_the_run_goes_on(tmp_path):
    code, doc = check(tmp_path, "--backend", f"{BUGS}:Crashes", "--shapes", "8x8,16x16", "--kinds", "fftn",
                      "--dtypes", "float64", "--timeout", "60")
    assert code == 1
    small = [r for r in doc["rows"] if r["shape"] == [8, 8]]
    big = [r for r in doc["rows"] if r["shape"] == [16, 16]]
    assert small and all(r["status"] in ("pass", "skip") for r in small)
    assert big and {r["status"] for r in big} == {"error"}


def test_backend_without_shaped_claims_gives_skip_rows(tmp_path, capsys):
    code, doc = check(tmp_path, "--backend", f"{BUGS}:OneDOnly", "--shapes", "8x8", "--dtypes", "float64")
    out = capsys.readouterr().out
    assert code == 0
    assert doc["rows"] and {(r["status"], r["check"]) for r in doc["rows"]} == {("skip", "all")}
    assert "claims no batched or N-D kinds" in doc["rows"][0]["message"]
    assert "shaped cases not run" in out


def test_sizes_and_shapes_together_run_both(tmp_path):
    code, doc = check(tmp_path, "--backend", "numpy", "--sizes", "16", "--shapes", "4x6", "--kinds", "fft",
                      "--dtypes", "float64")
    assert code == 0
    kinds = {(r["kind"], bool(r.get("shape"))) for r in doc["rows"]}
    assert kinds == {("fft", False), ("fftn", True)}
    assert load_results(str(tmp_path / "run.json"), "fftgauge-check/1")["rows"]


def test_shaped_checks_alone(tmp_path):
    code, doc = check(tmp_path, "--backend", "numpy", "--shapes", "6x10 along 0", "--checks",
                      "accuracy,batch-independence", "--dtypes", "float32")
    assert code == 0
    assert {r["check"] for r in doc["rows"]} == {"accuracy", "batch-independence"}


@pytest.mark.parametrize("args,words", [
    (["--shapes", "0x8"], "0x8"),
    (["--shapes", "8x8 along 2"], "8x8 along 2"),
    (["--shapes", "8x8,"], "empty item"),
    (["--layouts", "F"], "--shapes"),
    (["--shapes", "8x8", "--layouts", "diagonal"], "diagonal"),
    (["--shapes", "8x8", "--checks", "accuracy,bogus"], "bogus"),
])
def test_bad_shaped_options_are_exit_2_with_one_line(tmp_path, capsys, args, words):
    code = main(["check", "--backend", "numpy", "--quiet", "--json", str(tmp_path / "x.json"), *args])
    err = capsys.readouterr().err
    assert code == 2
    assert words in err and len(err.strip().splitlines()) == 1 and "Traceback" not in err
    assert not (tmp_path / "x.json").exists()


@pytest.mark.slow
@pytest.mark.parametrize("seed", [1, 2, 3])
def test_numpy_scipy_pyfftw_pass_the_default_shapes(tmp_path, seed):
    """The shaped battery's limits do not flag numpy, scipy or pyFFTW on @default (three seeds)."""
    pytest.importorskip("pyfftw")
    code, doc = check(tmp_path, "--backend", "numpy", "--backend", "scipy", "--backend", "pyfftw",
                      "--shapes", "@default", "--seed", str(seed))
    bad = [(r["backend"], r["kind"], r["dtype"], r["shape"], r["check"], r["message"]) for r in doc["rows"]
           if r["status"] in ("fail", "error")]
    assert code == 0 and not bad, bad[:5]
    assert sum(r["status"] == "pass" for r in doc["rows"]) > 9000
