"""Tests of fftgauge.harness.timing.scaling: fitted exponents on synthetic times of known growth, the outlier
rule and the words it uses.

The rows here are synthetic (times computed from a formula), not measurements: the tests
check the arithmetic of the analysis, never the speed of anything.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from fftgauge.harness.rows import TimeRow
from fftgauge.harness.timing.scaling import (
    FIT_MIN_N,
    OUTLIER_FACTOR,
    data_caches,
    find_outliers,
    fit_scaling,
    largest_prime_factor,
    parse_cache_bytes,
    scaling_report,
    working_set_bytes,
)

POW2 = [2**k for k in range(6, 21)]
MACHINE = {"cpu": "synthetic", "cores": 2, "caches": {"L1d": "32K", "L1i": "32K", "L2": "1024K", "L3": "4096K"}}


def row(n: int, seconds: float, backend: str = "demo", kind: str = "fft", dtype: str = "float64",
        status: str = "ok") -> dict:
    """A time row with the contract's fields; ns_per_nlogn left to the analysis to compute."""
    return {"backend": backend, "kind": kind, "dtype": dtype, "n": n, "threads": 1, "seconds": seconds,
            "seconds_low": seconds, "seconds_high": seconds, "status": status}


def nlogn_rows(c: float = 1e-9, sizes=POW2, **kw) -> list[dict]:
    return [row(n, c * n * math.log2(n), **kw) for n in sizes]


# --------------------------------------------------------------------------- fits

def test_exact_nlogn_times_give_exponent_one():
    """seconds = c N log2 N exactly: the slope of log seconds on log(N log2 N) is 1 (to 1e-9).

    Source of the fit: ordinary least squares (common practice); cross-checked against
    numpy.polyfit, an independent least-squares implementation.
    """
    (fit,) = fit_scaling(nlogn_rows())
    assert fit["exponent_nlogn"] == pytest.approx(1.0, abs=1e-9)
    assert fit["exponent_nlogn_stderr"] == pytest.approx(0.0, abs=1e-9)
    n = np.array(POW2, dtype=float)
    slope_n = np.polyfit(np.log(n), np.log(1e-9 * n * np.log2(n)), 1)[0]
    assert fit["exponent_n"] == pytest.approx(slope_n, rel=1e-12)
    assert 1.0 < fit["exponent_n"] < 1.25  # log2 N adds a little to the exponent of N
    assert fit["points"] == len(POW2) and fit["n_min"] == 64 and fit["n_max"] == 2**20
    assert fit["words"] == "consistent with O(N log N)"


def test_exact_quadratic_times_give_exponent_two_against_n():
    """seconds = c N^2: exponent 2 against N (to 1e-9); against N log2 N the numpy.polyfit slope."""
    rows = [row(n, 1e-9 * n * n) for n in POW2]
    (fit,) = fit_scaling(rows)
    assert fit["exponent_n"] == pytest.approx(2.0, abs=1e-9)
    n = np.array(POW2, dtype=float)
    slope = np.polyfit(np.log(n * np.log2(n)), np.log(1e-9 * n * n), 1)[0]
    assert fit["exponent_nlogn"] == pytest.approx(slope, rel=1e-12)
    assert 1.6 < fit["exponent_nlogn"] < 1.9  # what the module docstring says: it understates 2
    assert "N^2" in fit["words"]


def test_local_slope_of_quadratic_against_nlogn_matches_the_documented_formula():
    """The docstring's d log(N^2)/d log(N log2 N) = 2 ln N / (ln N + 1), derived by hand (from
    memory of calculus): checked numerically with a two-point fit across a narrow size pair."""
    n1, n2 = 2**19, 2**20
    (fit,) = fit_scaling([row(n, 1e-12 * n * n) for n in (n1, n2)])
    u = math.log(math.sqrt(n1 * n2))
    assert fit["exponent_nlogn"] == pytest.approx(2 * u / (u + 1), abs=2e-3)
    assert fit["exponent_nlogn_stderr"] is None  # two points leave no residual to estimate it


def test_standard_error_matches_the_ordinary_least_squares_formula():
    """Noisy N log N times: the standard error is sqrt(SSR/(m-2) / Sxx) of the ordinary
    least-squares slope (common practice), computed here independently with numpy."""
    rng = np.random.default_rng(7)
    n = np.array(POW2, dtype=float)
    seconds = 2e-9 * n * np.log2(n) * np.exp(rng.normal(0, 0.05, n.size))
    (fit,) = fit_scaling([row(int(k), float(s)) for k, s in zip(n, seconds)])
    x, y = np.log(n * np.log2(n)), np.log(seconds)
    slope, intercept = np.polyfit(x, y, 1)
    resid = y - (slope * x + intercept)
    stderr = math.sqrt(resid @ resid / (x.size - 2) / np.sum((x - x.mean()) ** 2))
    assert fit["exponent_nlogn"] == pytest.approx(slope, rel=1e-10)
    assert fit["exponent_nlogn_stderr"] == pytest.approx(stderr, rel=1e-8)
    assert fit["exponent_nlogn_stderr"] > 0


def test_fit_uses_only_powers_of_two_from_min_n_and_usable_rows():
    rows = nlogn_rows(sizes=[2**k for k in range(2, 15)])
    rows += [row(1009, 1.0), row(2**15, 1.0, status="error"), row(2**16, None, status="skip")]
    (fit,) = fit_scaling(rows)
    assert fit["n_min"] == FIT_MIN_N and fit["n_max"] == 2**14
    assert fit["exponent_nlogn"] == pytest.approx(1.0, abs=1e-9)  # the slow prime and bad rows are left out
    (small,) = fit_scaling(nlogn_rows(sizes=[4, 8, 16]))
    assert small["exponent_n"] is None and "too few" in small["words"]


def test_fits_are_per_backend_kind_and_dtype_and_accept_time_rows():
    rows = nlogn_rows(backend="a") + [row(n, 1e-9 * n * n, backend="b") for n in POW2]
    rows += nlogn_rows(backend="a", dtype="float32")
    as_objects = [TimeRow(backend=r["backend"], kind=r["kind"], dtype=r["dtype"], n=r["n"], threads=1,
                          plan_seconds=0.0, seconds=r["seconds"], seconds_low=r["seconds"],
                          seconds_high=r["seconds"], samples=5, loops=1, flops=0.0, gflops=0.0,
                          ns_per_nlogn=None, peak_bytes=None, in_place=False) for r in rows]
    fits = {(f["backend"], f["dtype"]): f for f in fit_scaling(as_objects)}
    assert set(fits) == {("a", "float64"), ("a", "float32"), ("b", "float64")}
    assert fits[("a", "float32")]["exponent_nlogn"] == pytest.approx(1.0, abs=1e-9)
    assert fits[("b", "float64")]["exponent_n"] == pytest.approx(2.0, abs=1e-9)


def test_fixed_cost_per_call_reads_as_such():
    """A constant 2 us per call on top of a fast N log N: the fitted exponent is below 1 and
    the words say that the fixed cost dominates."""
    rows = [row(n, 2e-6 + 1e-11 * n * math.log2(n)) for n in POW2[:10]]
    (fit,) = fit_scaling(rows)
    assert fit["exponent_n"] < 0.9
    assert "fixed cost" in fit["words"]


# --------------------------------------------------------------------------- outliers

def test_slow_prime_is_flagged_with_the_right_words():
    """A prime costing 14x the neighbouring powers of two: flagged as a Bluestein or O(N^2) path."""
    rows = nlogn_rows(sizes=[2**k for k in range(6, 17)])
    rows.append(row(9973, 14 * 1e-9 * 9973 * math.log2(9973)))
    rows.append(row(1009, 1.5 * 1e-9 * 1009 * math.log2(1009)))  # slower, but under the threshold
    (out,) = find_outliers(rows, MACHINE)
    assert out["n"] == 9973 and out["cause"] == "prime"
    assert out["ratio"] == pytest.approx(14.0, rel=1e-9)
    assert out["typical_ns_per_nlogn"] == pytest.approx(1.0, rel=1e-9)
    assert "n = 9973 (prime) costs 14x the typical time per N log2 N" in out["message"]
    assert "Bluestein or O(N^2) path" in out["message"]


def test_size_with_a_large_prime_factor_is_flagged_as_non_smooth():
    rows = nlogn_rows(sizes=[2**k for k in range(6, 17)])
    rows.append(row(9998, 8 * 1e-9 * 9998 * math.log2(9998)))  # 9998 = 2 x 4999
    (out,) = find_outliers(rows, MACHINE)
    assert out["cause"] == "non-smooth"
    assert "largest prime factor 4999" in out["message"] and "Bluestein or O(N^2)" in out["message"]


def test_cache_cliff_is_flagged_as_such():
    """Powers of two whose working set 2 n x 16 B exceeds the 4 MiB L3 cost 4x per N log2 N."""
    rows = []
    for n in POW2:
        c = 4e-9 if working_set_bytes("fft", "float64", n) > 4096 * 1024 else 1e-9
        rows.append(row(n, c * n * math.log2(n)))
    out = find_outliers(rows, MACHINE)
    assert sorted(o["n"] for o in out) == [2**18, 2**19, 2**20]
    for o in out:
        assert o["cause"] == "cache-cliff"
        assert "cache cliff" in o["message"] and "4 MiB L3 cache" in o["message"]
        assert o["working_set_bytes"] == 32 * o["n"]
    assert "8 MiB" in next(o for o in out if o["n"] == 2**18)["message"]


def test_cliff_without_cache_sizes_says_they_are_unknown():
    rows = [row(n, (4e-9 if n >= 2**18 else 1e-9) * n * math.log2(n)) for n in POW2]
    out = find_outliers(rows, {"cpu": "x", "caches": {}})
    assert {o["cause"] for o in out} == {"unknown"}
    assert all("no cache sizes" in o["message"] for o in out)


def test_fixed_cost_at_small_sizes_is_not_flagged():
    """2 us per call plus 0.3 ns per N log2 N: small sizes cost far more per N log2 N than
    large ones, but every size matches its neighbours, so nothing is flagged (the reason the
    rule compares with neighbouring powers of two rather than one median)."""
    sizes = POW2 + [97, 1000, 1009]
    rows = [row(n, 2e-6 + 0.3e-9 * n * math.log2(n)) for n in sizes]
    per_nlogn = [r["seconds"] / (r["n"] * math.log2(r["n"])) for r in rows]
    assert max(per_nlogn) / float(np.median(per_nlogn)) > OUTLIER_FACTOR  # a single median would flag
    assert find_outliers(rows, MACHINE) == []


def test_group_without_powers_of_two_uses_its_median():
    primes = [1009, 2003, 4093, 8191, 9973]
    rows = [row(p, 1e-9 * p * math.log2(p)) for p in primes]
    rows[2]["seconds"] *= 10
    (out,) = find_outliers(rows, MACHINE)
    assert out["n"] == 4093 and out["typical_from"] == "the median of its sizes"


# --------------------------------------------------------------------------- helpers and report

@pytest.mark.parametrize("text, expected", [("32K", 32 * 1024), ("1024K", 1024**2), ("8M", 8 * 1024**2),
                                            ("1 MiB", 1024**2), ("2G", 2 * 1024**3), (65536, 65536),
                                            ("lots", None), (None, None), (-1, None)])
def test_parse_cache_bytes(text, expected):
    """Linux sysfs writes cache sizes as e.g. "32K", "1024K" in binary units (common practice)."""
    assert parse_cache_bytes(text) == expected


def test_data_caches_leave_out_instruction_caches_and_sort_by_size():
    assert data_caches(MACHINE) == [("L1d", 32768), ("L2", 1024**2), ("L3", 4 * 1024**2)]
    assert data_caches(None) == [] and data_caches({"caches": None}) == []


def test_working_set_counts_input_and_output():
    """fft: n complex in and out; rfft: n reals in, n/2 + 1 complex out (numpy item sizes)."""
    assert working_set_bytes("fft", "float64", 1024) == 2 * 1024 * np.dtype(np.complex128).itemsize
    assert working_set_bytes("fft", "float32", 1024) == 2 * 1024 * np.dtype(np.complex64).itemsize
    assert working_set_bytes("rfft", "float64", 8) == 8 * 8 + 5 * 16
    assert working_set_bytes("irfft", "float64", 8) == 5 * 16 + 8 * 8


@pytest.mark.parametrize("n", [1, 2, 97, 1024, 9998, 3 * 5 * 7 * 11, 65537, 2**3 * 3**4 * 13])
def test_largest_prime_factor_against_brute_force(n):
    brute = max([p for p in range(2, n + 1) if n % p == 0 and all(p % d for d in range(2, int(p**0.5) + 1))],
                default=1)
    assert largest_prime_factor(n) == brute


def test_scaling_report_text():
    rows = nlogn_rows(backend="fast") + [row(n, 1e-9 * n * n, backend="slow") for n in POW2[:6]]
    rows.append(row(9973, 14 * 1e-9 * 9973 * math.log2(9973), backend="fast"))
    text = scaling_report(rows, MACHINE)
    lines = text.splitlines()
    fast = next(line for line in lines if line.strip().startswith("fast fft float64"))
    assert "(N log2 N)^1.000" in fast and "O(N log N)" in fast
    slow = next(line for line in lines if line.strip().startswith("slow fft float64"))
    assert "N^2.000" in slow and "grows like N^2" in slow
    assert any("n = 9973 (prime)" in line for line in lines)
    assert scaling_report([], MACHINE) == "scaling: no timed rows to analyse"
    assert "no size costs" in scaling_report(nlogn_rows(), MACHINE)
