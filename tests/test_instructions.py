"""The instruction-count metric: cachegrind output parsing, the K/2K difference, the count ratio
and its interval, the request's checks, the outputs' metric column; end to end under valgrind
(marked slow, skipped where valgrind is missing): a fixed extra 1% / 5% of work is seen in A/B,
stored and referenced modes (one saved A/B run shared), the same code is ``same``, simulated
last-level misses grow past the simulated cache, a crashing backend is one line."""

import json
import math
import os
import shutil
import subprocess
import sys

import numpy as np
import pytest
from scipy import stats

from fftgauge.harness import cli
from fftgauge.harness.cases import Case
from fftgauge.harness.counts import cachegrind
from fftgauge.harness.counts.cachegrind import RunCount, default_calls, parse_counts, per_transform
from fftgauge.harness.counts.measure import SPREAD_FLOOR, CaseCount, misses_per_transform, count_ratio, count_sides
from fftgauge.harness.errors import BackendFailure, UsageError
from fftgauge.harness.gate.decision import decide
from fftgauge.harness.gate.outputs import csv_text, junit_xml, markdown_summary, summary_text
from fftgauge.harness.gate.request import build_request

HERE = os.path.dirname(os.path.abspath(__file__))
FIXED = os.path.join(HERE, "data", "fixed_work_fft.py")
MISBEHAVING = os.path.join(HERE, "data", "misbehaving.py")
needs_valgrind = pytest.mark.skipif(shutil.which("valgrind") is None, reason="valgrind is not installed")

# The layout of a cachegrind output file as valgrind 3.19 writes it (valgrind's manual, "Cachegrind
# output file format": desc/cmd/events lines, fl=/fn= lines, cost lines "line count...", summary).
SAMPLE = """desc: I1 cache:         65536 B, 64 B, 16-way associative
cmd: python driver.py
events: Ir I1mr ILmr Dr D1mr DLmr Dw D1mw DLmw
fl=/src/a.c
fn=main
3 10 1 1 4 1 0 2 0 0
4 5
summary: 15 1 1 4 1 0 2
"""


def test_parse_counts_reads_events_and_summary_and_zero_fills():
    counts = parse_counts(SAMPLE)
    assert counts["Ir"] == 15 and counts["I1mr"] == 1 and counts["Dw"] == 2
    assert counts["D1mw"] == 0 and counts["DLmw"] == 0  # left off at the end: 0 by the format
    assert cachegrind.ll_misses(counts) == 1 + 0 + 0
    assert cachegrind.ll_misses({"Ir": 5}) is None
    assert parse_counts("events: Ir\ntotals: 7\n") == {"Ir": 7}
    for bad in ("", "events: Ir\n", "summary: 3\n", "events: Ir\nsummary: 1 2\n"):
        with pytest.raises(ValueError):
            parse_counts(bad)


def test_per_transform_is_the_difference_over_k():
    short = RunCount(10, {"Ir": 1_000_000}, 1.0)
    long = RunCount(20, {"Ir": 1_500_000}, 1.5)
    assert per_transform(short, long) == 50_000.0
    with pytest.raises(BackendFailure, match="no more"):
        per_transform(short, RunCount(20, {"Ir": 1_000_000}, 1.0))


def testmisses_per_transform_is_the_difference_over_k_and_never_below_zero():
    def run(calls, misses):
        return RunCount(calls, {"Ir": 1, "ILmr": misses, "DLmr": 0, "DLmw": 0}, 1.0)

    assert misses_per_transform(run(10, 1000), run(20, 1640)) == 64.0
    # start-up noise larger than the transforms' own misses (seen in CI: -25.6 with K = 10)
    assert misses_per_transform(run(10, 1000), run(20, 744)) == 0.0


def test_default_calls_bounds():
    assert default_calls(1) == 1000 and default_calls(64) == 1000
    assert default_calls(1 << 20) == 4
    assert default_calls(1024) == math.ceil(2 ** 21 / (1024 * 10))  # 205


def _count(values, calls=10):
    return CaseCount(calls, tuple(float(v) for v in values), None, 1.0)


def test_count_ratio_matches_welch_on_logs():
    new, old = _count([1010.0, 1012.0, 1009.0]), _count([1000.0, 1001.5, 999.0])
    r = count_ratio(new, old)
    # Welch's t test from scipy on the same log counts (ratio is of medians, the test of means)
    ref = stats.ttest_ind(np.log(new.instructions), np.log(old.instructions), equal_var=False)
    assert r.ratio == pytest.approx(1010.0 / 1000.0)
    mean_diff = np.mean(np.log(new.instructions)) - np.mean(np.log(old.instructions))
    se = mean_diff / ref.statistic
    dof = ref.df
    assert r.p_value == pytest.approx(2 * stats.t.sf(abs(math.log(r.ratio)) / se, dof), rel=1e-9)
    assert r.ratio_low < r.ratio < r.ratio_high


def test_count_ratio_with_zero_spread_is_floored_not_degenerate():
    same = count_ratio(_count([5000.0, 5000.0, 5000.0]), _count([5000.0, 5000.0, 5000.0]))
    assert same.ratio == 1.0 and same.p_value == 1.0
    assert same.ratio_low < 1.0 < same.ratio_high
    # the width comes from the floor: t(0.975, 4 dof) * sqrt(2 * floor^2 / 3) on the log scale
    half = stats.t.ppf(0.975, 4) * math.sqrt(2 * SPREAD_FLOOR ** 2 / 3)
    assert math.log(same.ratio_high) == pytest.approx(half, rel=1e-9)
    up = count_ratio(_count([5050.0] * 3), _count([5000.0] * 3))
    assert up.ratio == pytest.approx(1.01) and up.ratio_low > 1.0 and up.p_value < 1e-6
    verdicts = decide([_estimate(up), _estimate(same)], 0.005, 0.05)
    assert [v[0] for v in verdicts] == ["slower", "same"]


def _estimate(r):
    from fftgauge.harness.gate.estimates import Estimate
    return Estimate(r.ratio, r.ratio_low, r.ratio_high, r.p_value, None, None, None, None, r.ratio, False, "x")


def test_missing_valgrind_is_a_usage_error_with_the_install_line(monkeypatch):
    monkeypatch.setattr(cachegrind, "find_valgrind", lambda: None)
    with pytest.raises(UsageError, match="apt-get install valgrind"):
        build_request(old="numpy", new="numpy", metric="instructions")
    assert "not found" in cachegrind.availability_line()


def test_cli_without_valgrind_exits_2_with_one_line(tmp_path):
    env = dict(os.environ, PATH=str(tmp_path))  # no valgrind on this PATH
    done = subprocess.run([sys.executable, "-m", "fftgauge", "gate", "--old", "numpy", "--new", "numpy",
                           "--metric", "instructions"], env=env, capture_output=True, text=True, timeout=120)
    assert done.returncode == 2
    assert done.stderr.count("\n") == 1 and "apt-get install valgrind" in done.stderr, done.stderr
    assert "Traceback" not in done.stderr


def test_request_checks_and_default_threshold(monkeypatch):
    monkeypatch.setattr(cachegrind, "find_valgrind", lambda: "/usr/bin/valgrind")
    assert build_request(old="numpy", new="numpy", metric="instructions").settings.threshold == 0.01
    assert build_request(old="numpy", new="numpy").settings.threshold == 0.05
    assert build_request(old="numpy", new="numpy", metric="instructions", threshold="3%").settings.threshold == 0.03
    with pytest.raises(UsageError, match="go with --metric instructions"):
        build_request(old="numpy", new="numpy", cache_sim=True)
    with pytest.raises(UsageError, match="at least 2"):
        build_request(old="numpy", new="numpy", metric="instructions", count_repeats=1)
    with pytest.raises(UsageError, match="--accuracy"):
        build_request(old="numpy", new="numpy", metric="instructions", accuracy=True)
    with pytest.raises(UsageError, match="--metric"):
        build_request(old="numpy", new="numpy", metric="cycles")


def _counted_doc():
    from fftgauge.harness.gate.request import GateSettings, GateRequest
    from fftgauge.harness.gate.run import new_doc
    req = GateRequest(mode="ab", old_spec="old.py:fft", new_spec="new.py:fft",
                      settings=GateSettings(threshold=0.01, metric="instructions", count_repeats=3))
    doc = new_doc(req)
    row = {"backend": "new", "kind": "fft", "dtype": "float64", "n": 1024, "ratio": 1.05, "ratio_low": 1.049,
           "ratio_high": 1.051, "p_value": 1e-8, "verdict": "slower", "status": "ok", "p_holm": 1e-8,
           "metric": "instructions", "instructions": 165000.0, "baseline_instructions": 157000.0,
           "instructions_spread": 1e-5, "baseline_instructions_spread": 0.0, "count_repeats": 3}
    doc.update(rows=[row], outcome="regression", regressed=True, complete=True)
    return doc


def test_outputs_name_the_metric():
    doc = _counted_doc()
    md = markdown_summary(doc)
    assert "| metric | instructions new / old | spread |" in md and "165,000 / 157,000" in md
    assert "metric instructions per transform" in summary_text(doc)
    xml = junit_xml(doc)
    assert '<property name="metric" value="instructions"' in xml and "in instructions per transform" in xml
    header = csv_text(doc).splitlines()[0].split(",")
    assert "metric" in header and "instructions" in header
    assert doc["metric"] == "instructions" and doc["counting"]["repeats"] == 3


@pytest.fixture(scope="module")
def history(tmp_path_factory):
    """One A/B count gate run (old ``fft``, new ``fft_plus1``: 1% more numpy passes), saved into a
    history folder; the A/B, stored and referenced tests below share it (8 valgrind runs)."""
    if shutil.which("valgrind") is None:
        pytest.skip("valgrind is not installed")
    folder = tmp_path_factory.mktemp("counts")
    code = cli.main(["gate", "--old", f"{FIXED}:fft", "--new", f"{FIXED}:fft_plus1", "--metric", "instructions",
                     "--threshold", "0.5%", "--kinds", "fft", "--sizes", "64", "--count-repeats", "2",
                     "--count-transforms", "10", "--json", str(folder / "ab.json"), "--junit", str(folder / "ab.xml"),
                     "--save", str(folder / "hist"), "--quiet"])
    return code, folder, json.loads((folder / "ab.json").read_text())


# Bounds. With the driver's entropy pinned and its bytecode frozen, fresh processes count the
# same run to the instruction (measured on the 2-core development machine at load 3-8: run
# totals equal in 3 of 3 processes, and per-transform counts equal with other environment sizes,
# another bytecode cache path and randomisation on); before, totals wandered by up to 4.5e3
# (entropy-seeded start-up) and by millions when a source file was edited during a count.
# The same code counted by two gate runs (the history's A/B run and a stored-mode run) differed
# by 1.9e-4 per transform (4,257,770 against 4,256,962; each run's repeats equal to the
# instruction; cause not found: not the environment's size, the simulated caches, the bytecode
# cache's path or randomisation, each measured equal). Later, with other sessions editing the
# tree's sources between the two runs, 9.0e-4 (4,260,800 against 4,256,962). The bounds keep
# 1e-6 for the repeats' spread and 2e-3 for the same code across gate runs, five times below
# the 1% to be seen.
SAME_CODE = 2e-3


@pytest.mark.slow
def test_ab_counts_see_one_percent_more_work(history):
    code, folder, doc = history
    assert code == 1 and doc["outcome"] == "regression" and doc["metric"] == "instructions"
    (row,) = doc["rows"]
    assert row["metric"] == "instructions" and row["verdict"] == "slower" and row["seconds"] is None
    # 101 passes against 100: 1% more work, less the call's fixed overhead
    assert 1.008 < row["ratio"] < 1.012 and row["ratio_low"] > 1.0
    assert row["count_repeats"] == 2 and len(row["instructions_repeats"]) == 2
    assert row["instructions_spread"] < 1e-6 and row["baseline_instructions_spread"] < 1e-6
    assert "in instructions per transform" in (folder / "ab.xml").read_text()
    fp = doc["counting"]["fingerprint"]
    assert fp["valgrind"].startswith("valgrind-") and fp["instruction_set"]["found"]


@pytest.mark.slow
def test_stored_counts_of_the_same_code_are_the_same(history, tmp_path):
    _, folder, ab = history
    out = tmp_path / "stored.json"
    code = cli.main(["gate", "--backend", f"{FIXED}:fft_plus1", "--baseline", str(folder / "hist"), "--metric",
                     "instructions", "--count-repeats", "2", "--count-transforms", "10", "--cache-sim",
                     "--json", str(out), "--quiet"])
    doc = json.loads(out.read_text())
    (row,) = doc["rows"]
    assert code == 0 and row["verdict"] == "same" and row["baseline_runs"] == 1
    assert abs(row["ratio"] - 1.0) < SAME_CODE, row["ratio"]  # another gate run, other processes and caches
    assert row["baseline_instructions_repeats"] == ab["rows"][0]["instructions_repeats"]
    # n = 64 fits the simulated 8 MiB last level: under one miss per point per transform (the
    # test below sees the misses grow past a smaller one)
    assert 0 <= row["ll_misses"] < 64 and row["baseline_ll_misses"] is None
    assert doc["counting"]["simulated_caches"]["LL"] == [8388608, 16, 64]


@pytest.mark.slow
def test_referenced_counts_see_five_percent_against_the_stored_one(history, tmp_path):
    _, folder, ab = history
    out = tmp_path / "ref.json"
    code = cli.main(["gate", "--old", f"{FIXED}:fft", "--new", f"{FIXED}:fft_plus5", "--baseline",
                     str(folder / "hist"), "--baseline-backend", "fixed_work_fft:fft_plus1", "--metric",
                     "instructions", "--kinds", "fft", "--sizes", "64", "--count-repeats", "2",
                     "--count-transforms", "10", "--json", str(out), "--quiet"])
    (row,) = json.loads(out.read_text())["rows"]
    assert code == 1 and row["verdict"] == "slower" and row["baseline_runs"] == 1
    assert 1.045 < row["ab_ratio"] < 1.052  # 105 passes against 100
    # this run's A/B ratio against the stored one (101 against 100)
    assert row["ratio"] == pytest.approx(row["ab_ratio"] / ab["rows"][0]["ratio"], rel=1e-9)
    assert row["ratio_low"] > 1.0


@pytest.mark.slow
@needs_valgrind
def test_cache_sim_sees_a_working_set_beyond_the_last_level():
    """A simulated last level of 256 KiB: n = 1024 (32 KiB in and out) fits, n = 65536 (2 MiB)
    does not. Measured: 0.62 and 4.15 misses per point per transform."""
    from concurrent.futures import ThreadPoolExecutor

    def misses(n, calls):
        got = count_sides(cachegrind.require_valgrind(), {"x": "numpy"}, Case("fft", "float64", n), seed=1234,
                          calls=calls, repeats=1, cache_sim=True, caches={"LL": (262144, 16, 64)})["x"]
        return got.ll_median / n

    with ThreadPoolExecutor(max_workers=2) as pool:
        fits, exceeds = pool.map(misses, (1024, 65536), (8, 2))
    assert fits >= 0 and exceeds > 3 * fits and exceeds > 1.0


@pytest.mark.slow
@needs_valgrind
def test_a_backend_crashing_under_valgrind_is_one_line():
    with pytest.raises(BackendFailure, match="crashed under valgrind") as info:
        cachegrind.count_run(cachegrind.require_valgrind(), f"{MISBEHAVING}:segfault_fft",
                             Case("fft", "float64", 16), 1234, 1)
    assert "\n" not in str(info.value)
    with pytest.raises(BackendFailure, match="refuses every input"):  # found by the run without valgrind
        count_sides(cachegrind.require_valgrind(), {"x": f"{MISBEHAVING}:raise_fft"}, Case("fft", "float64", 16),
                    seed=1234, calls=1, repeats=2)


@pytest.mark.slow
@needs_valgrind
def test_time_with_instructions_adds_counts_beside_times(tmp_path, capsys):
    out = tmp_path / "time.json"
    code = cli.main(["time", "--backend", "numpy", "--kinds", "fft", "--sizes", "64", "--samples", "5",
                     "--budget", "0.5", "--metric", "instructions", "--json", str(out), "--quiet"])
    assert code == 0
    (row,) = json.loads(out.read_text())["rows"]
    assert row["instructions"] > 0 and row["seconds"] > 0
    assert row["instructions_per_point"] == pytest.approx(row["instructions"] / 64)
    assert row["instructions_per_nlogn"] == pytest.approx(row["instructions"] / (64 * 6))  # 64 log2 64
    assert row["ns_per_instruction"] == pytest.approx(row["seconds"] * 1e9 / row["instructions"])
    assert "instructions per transform (cachegrind)" in capsys.readouterr().out


def test_host_instruction_set_reads_the_flags_line(tmp_path):
    info = tmp_path / "cpuinfo"
    info.write_text("processor\t: 0\nflags\t\t: fpu sse sse2 avx2 fma avx512f lm\n\nprocessor\t: 1\n")
    assert cachegrind.host_instruction_set(str(info)) == ["avx2", "avx512f", "fma", "sse", "sse2"]
    assert cachegrind.host_instruction_set(str(tmp_path / "missing")) == []
