"""Tests of the localisation: size patterns (harness/battery/size_patterns.py), bins and
stages (harness/battery/localise.py) and output aliasing (harness/battery/aliasing.py), on
the broken FFTs of tests/data/localised_bugs.py.

Sources: the ground truth is scipy.fft on long double (the battery's reference) and numpy.fft
where said; the DFT shift theorem (Oppenheim & Schafer, Discrete-Time Signal Processing,
3rd ed., Table 8.2: a delay of d samples multiplies X[k] by exp(-2j pi k d / N)) is verified
numerically with np.roll below; which bins one wrong twiddle of the last radix-2 stage
touches follows from the decimation-in-time butterfly X[k] = E[k] + W^k O[k],
X[k + N/2] = E[k] - W^k O[k] (Cooley & Tukey, Math. Comp. 19 (1965) 297-301) and is checked
against the reference bin by bin; primes and factorisations are checked by trial division
against the product of the factors.
"""

from __future__ import annotations

import importlib.util
import pathlib

import numpy as np
import pytest
import scipy.fft

from fftgauge.backends.registry import load_backend
from fftgauge.harness.battery import diagnosis as diag
from fftgauge.harness.battery.bounds import accuracy_limit
from fftgauge.harness.battery.checks import check_case
from fftgauge.harness.battery.localise import localise_error, stage_of
from fftgauge.harness.battery.size_patterns import infer_rule, prime_factors, size_patterns
from fftgauge.harness.cases import Case
from fftgauge.harness.dft import machine_epsilon, unit_roundoff
from fftgauge.harness.sizes import is_prime, parse_sizes

DATA = pathlib.Path(__file__).parent / "data" / "localised_bugs.py"
_spec = importlib.util.spec_from_file_location("localised_bugs", DATA)
bugs = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(bugs)

DEFAULT = parse_sizes("@default")


def _exact(x: np.ndarray) -> np.ndarray:
    """The reference transform: scipy.fft on long double."""
    return scipy.fft.fft(np.asarray(x).astype(np.clongdouble)).astype(np.complex128)


def _input(n: int, dtype=np.complex128, seed: int = 5) -> np.ndarray:
    rng = np.random.default_rng(seed)
    return (rng.standard_normal(n) + 1j * rng.standard_normal(n)).astype(dtype)


def _lower_precision_level(case: Case, err: float, lower: str) -> bool:
    """Whether ``err`` lies in the band diagnosis.py calls "the level of ``lower``"
    (PRECISION_LOW_UNITS u_lower .. PRECISION_HIGH_FACTOR limit eps_lower / eps)."""
    low = diag.PRECISION_LOW_UNITS * unit_roundoff(lower)
    high = diag.PRECISION_HIGH_FACTOR * accuracy_limit(case) * machine_epsilon(lower) / machine_epsilon(case.dtype)
    return low <= err <= high


# -- size patterns ----------------------------------------------------------------------------------

def test_prime_factors_multiply_back_and_are_prime():
    for n in DEFAULT:
        f = prime_factors(n)
        assert int(np.prod(f, dtype=object)) == n
        assert all(is_prime(p) for p in f)


@pytest.mark.parametrize("predicate, rule, words", [
    (lambda n: n % 3 == 0, "divisible-by-3", "radix-3 pass"),
    (lambda n: n % 5 == 0, "divisible-by-5", "radix-5 pass"),
    (lambda n: n % 9 == 0, "factor-3-twice", "two radix-3 passes"),
    (lambda n: n % 2 == 1, "odd", "odd-length"),
    (lambda n: n >= 4096, "above", "large-size path"),
    (lambda n: is_prime(n) and n > 64, "prime-above", "Bluestein"),
    (lambda n: is_prime(n), "prime", "Rader"),
    (lambda n: n & (n - 1) == 0, "pow2", "power-of-two"),
])
def test_a_rule_over_the_default_sizes_is_found_with_its_code_path(predicate, rule, words):
    failing = [n for n in DEFAULT if predicate(n)]
    passing = [n for n in DEFAULT if not predicate(n)]
    found = infer_rule(failing, passing)
    assert found["rule"] == rule, found["sentence"]
    assert words in found["suggests"]
    assert "look at" in found["sentence"]


def test_the_bounds_come_from_the_data():
    found = infer_rule([n for n in DEFAULT if n >= 4096], [n for n in DEFAULT if n < 4096])
    assert found["words"] == "n > 4095 (every size from 4096 up)"
    found = infer_rule([n for n in DEFAULT if is_prime(n) and n > 64], [n for n in DEFAULT if not (is_prime(n) and n > 64)])
    assert found["words"] == "n prime and n > 61 (every prime from 67 up)"


def test_no_rule_is_invented():
    failing = list(bugs.NO_RULE_SIZES)
    found = infer_rule(failing, [n for n in DEFAULT if n not in failing])
    assert found["rule"] is None
    assert found["sentence"].startswith("no size rule fits")
    everything = infer_rule([4, 8], [])
    assert everything["rule"] is None and "every size tried" in everything["sentence"]


def test_size_patterns_group_rows_and_skip_passing_groups():
    rows = [{"backend": "b", "kind": "fft", "dtype": "float64", "n": n, "check": "accuracy",
             "status": "fail" if n % 3 == 0 else "pass"} for n in range(1, 40)]
    rows += [{"backend": "ok", "kind": "fft", "dtype": "float64", "n": n, "check": "accuracy", "status": "pass"}
             for n in range(1, 40)]
    rows += [{"backend": "b", "kind": "fft", "dtype": "float64", "n": 41, "check": "accuracy", "status": "error"}]
    found = size_patterns(rows)
    assert [(p["backend"], p["rule"]) for p in found] == [("b", "divisible-by-3")]
    assert 41 not in found[0]["failing_sizes"] + found[0]["passing_sizes"]  # errors count as neither


# -- bins and stages ----------------------------------------------------------------------------------

def test_last_stage_twiddle_is_localised_not_precision():
    """The issue's case: one wrong twiddle in the last stage of a 4096-point radix-2 FFT."""
    n = 4096
    case = Case("fft", "float64", n)
    x = _input(n)
    y = bugs.radix2_last_twiddle(x)
    truth = _exact(x)
    wrong = np.flatnonzero(np.abs(y - truth) > 1e-9 * np.abs(truth).max())
    assert list(wrong) == [n // 2 - 1, n - 1]  # the butterfly k = N/2-1, k + N/2 (Cooley-Tukey DIT)
    err = float(np.linalg.norm(y - truth) / np.linalg.norm(truth))
    assert _lower_precision_level(case, err, "float32")  # the error's size alone reads as float32's level
    code, message = diag.diagnose(case, x, y)
    assert code == "localised"
    assert "k = 2047, 4095" in message and "last stage" in message


@pytest.mark.parametrize("n", [4, 8, 64])
def test_the_last_stage_pair_is_named_at_small_sizes_too(n):
    case = Case("fft", "float64", n)
    x = _input(n)
    code, message = diag.diagnose(case, x, bugs.radix2_last_twiddle(x))
    assert code == "localised" and f"k = {n // 2 - 1}, {n - 1};" in message and "last stage" in message


def test_stage_of_names_the_dit_stage_of_a_residue_class():
    # the 8 bins k = 3 (mod 8) of N = 64: stage log2(16) = 4, span 8, twiddle index 3
    assert stage_of(tuple(range(3, 64, 8)), 64) == (4, 8, 3)
    assert stage_of((31, 63), 64) == (6, 32, 31)
    assert stage_of((1, 2), 64) is None


def test_an_error_in_one_stage_is_named_with_its_bit_reversed_block():
    n = 64
    case = Case("fft", "float64", n)
    x = _input(n)
    truth = _exact(x)
    y = truth.copy()
    y[3::16] *= 1.01  # every bin k = 3 (mod 16): a wrong twiddle j = 3 of stage 5
    found = localise_error(case, truth, y)
    assert found.kind == "bins" and found.stage == 5
    assert "radix-2 stage 5" in found.words and "bit-reversed positions" in found.words


def test_a_wrong_twiddle_of_the_first_dif_stage_is_named_by_its_bit_reversed_block():
    """Decimation in frequency: stage 1's twiddles feed the size-N/2 sub-transform of the odd
    bins, whose outputs are the second half in bit-reversed order; checked bin by bin."""
    n = 64
    case = Case("fft", "float64", n)
    x = _input(n)
    y = bugs.radix2_dif_twiddle(x)
    truth = _exact(x)
    wrong = np.flatnonzero(np.abs(y - truth) > 1e-9 * np.abs(truth).max())
    assert set(wrong) <= set(range(1, n, 2)) and len(wrong) > n // 4
    code, message = diag.diagnose(case, x, y)
    assert code == "localised"
    assert "k = 1 (mod 2)" in message and "block 32..63" in message and "after stage 1" in message


def test_bluestein_padding_bug_is_localised_not_float16():
    case = Case("fft", "float32", 101)
    x = _input(101, np.complex64)
    y = bugs.bluestein_padding(x)
    truth = _exact(x)
    err = float(np.linalg.norm(y - truth) / np.linalg.norm(truth))
    assert _lower_precision_level(case, err, "float16")  # the size alone reads as float16's level
    code, message = diag.diagnose(case, x, y)
    assert code == "localised"
    assert "(k = 0;" in message and "Bluestein" in message


@pytest.mark.parametrize("d", [3, 0.5])
def test_a_time_shift_is_found_with_its_size(d):
    n = 100
    case = Case("fft", "float64", n)
    x = _input(n)
    k = np.arange(n)
    if d == 3:  # shift theorem, checked: the transform of x delayed by 3 is X[k] exp(-2j pi k 3 / N)
        y = np.fft.fft(np.roll(x, 3))
        assert np.allclose(y, _exact(x) * np.exp(-2j * np.pi * k * 3 / n), atol=1e-10)
    else:
        y = bugs.half_sample(x)
    code, message = diag.diagnose(case, x, y)
    assert code == "time-shifted"
    assert f"estimated d = {d:.4g}" in message


def test_rounding_noise_is_spread():
    n = 256
    case = Case("fft", "float64", n)
    x = _input(n)
    y = np.fft.fft(x.astype(np.complex64)).astype(np.complex128)  # computed in float32
    found = localise_error(case, _exact(x), y)
    assert found.kind == "spread"
    assert diag.diagnose(case, x, y)[0] == "precision"


def test_radix3_and_odd_real_bugs_fail_through_the_battery_with_their_codes():
    b = load_backend(f"{DATA}:radix3_pass")
    rows = check_case(b, Case("fft", "float64", 48), 1, ["accuracy"])
    assert rows[0].status == "fail"
    odd = load_backend(f"{DATA}:odd_real[kind=rfft]")
    rows = check_case(odd, Case("rfft", "float64", 33), 1, ["accuracy"])
    assert rows[0].status == "fail" and rows[0].diagnosis == "localised"
    assert "(k = 16;" in rows[0].message
    assert check_case(odd, Case("rfft", "float64", 32), 1, ["accuracy"])[0].status == "pass"


def test_a_real_input_fast_path_is_found_on_the_real_inputs():
    """Right on random complex inputs, wrong on real ones: the checks with real inputs name
    the wrong half of the spectrum and the real input."""
    b = load_backend(f"{DATA}:real_fast_path")
    rows = {r.check: r for r in check_case(b, Case("fft", "float64", 64), 1, ["accuracy", "symmetry"])}
    assert rows["accuracy"].status == "pass"  # complex inputs
    sym = rows["symmetry"]
    assert (sym.status, sym.diagnosis) == ("fail", "localised")
    assert "upper half of the spectrum" in sym.message and "real-input fast path" in sym.message


# -- output aliasing ----------------------------------------------------------------------------------

def test_an_aliased_output_is_not_thread_unsafe():
    b = load_backend(f"{DATA}:aliased_output_slow")
    rows = {r.check: r for r in check_case(b, Case("fft", "float64", 256), 1, ["repeatable", "concurrent"])}
    assert rows["repeatable"].status == "fail" and rows["repeatable"].diagnosis == "output-aliased"
    assert "internal output buffer" in rows["repeatable"].message
    assert rows["concurrent"].diagnosis in (None, "output-aliased")  # never thread-unsafe
    assert rows["concurrent"].status == "fail"  # 20 ms between writing and returning: threads overwrite


def test_a_shared_scratch_buffer_behind_fresh_outputs_stays_thread_unsafe():
    """tests/data/broken_ffts.py:shared_scratch_fft returns a new array each call (its race is in
    the input scratch): it keeps thread-unsafe, and its kept results do not change."""
    b = load_backend(f"{DATA.parent / 'broken_ffts.py'}:shared_scratch_fft")
    rows = {r.check: r for r in check_case(b, Case("fft", "float64", 256), 4, ["repeatable", "concurrent"])}
    assert rows["repeatable"].status == "pass"
    assert (rows["concurrent"].status, rows["concurrent"].diagnosis) == ("fail", "thread-unsafe")


@pytest.mark.parametrize("spec", ["numpy", "scipy", "pyfftw", "radix2-dit"])
def test_library_backends_are_not_aliased_and_get_no_localisation(spec):
    try:
        b = load_backend(spec)
    except Exception as exc:  # noqa: BLE001 - an optional library that is not installed
        pytest.skip(f"{spec}: {exc}")
    rows = check_case(b, Case("fft", "float64", 64), 1, ["accuracy", "repeatable"])
    assert [r.status for r in rows] == ["pass", "pass"]
    assert size_patterns([r.as_dict() for r in rows]) == []


# -- through the battery: the JSON field, the terminal summary, the findings ------------------------

def test_a_battery_run_carries_the_size_patterns_in_the_json_and_the_summary():
    from fftgauge.harness.battery import run as battery
    from fftgauge.harness.report.check_tables import format_summary, rows_frame
    from fftgauge.harness.report.findings import findings

    specs = tuple(f"{DATA}:{name}" for name in ("radix3_pass", "bluestein_padding", "large_path", "no_rule")) + \
        ("numpy",)
    sizes = tuple(range(2, 17)) + (22, 39, 56, 61, 67, 97, 101, 128, 4093, 4096, 5000)
    req = battery.BatteryRequest(specs=specs, kinds=("fft",), dtypes=("float32",), sizes=sizes)
    doc = battery.run_battery(req, quiet=True)
    rules = {p["backend"].split(":")[-1]: p for p in doc["size_patterns"]}
    assert set(rules) == {"radix3_pass", "bluestein_padding", "large_path", "no_rule"}  # numpy passes: none
    assert rules["radix3_pass"]["rule"] == "divisible-by-3"
    assert rules["bluestein_padding"]["rule"] == "prime-above"
    assert rules["bluestein_padding"]["failing_sizes"] == [67, 97, 101, 4093]
    assert rules["large_path"]["rule"] == "above" and rules["large_path"]["failing_sizes"] == [4096, 5000]
    assert rules["no_rule"]["rule"] is None and rules["no_rule"]["failing_sizes"] == list(bugs.NO_RULE_SIZES)
    text = format_summary(rows_frame(doc["rows"]))
    assert "look at the radix-3 pass" in text and "no size rule fits" in text
    assert "numpy · fft" not in text.split("size patterns")[1]
    sentences = " ".join(f.sentence() for f in findings(doc["rows"]))
    assert "Sizes: fft float32: the 4 failing sizes are exactly those with n prime and n > 61" in sentences
    bluestein = [r for r in doc["rows"] if r["backend"].endswith("bluestein_padding") and r["check"] == "accuracy"
                 and r["status"] == "fail"]
    assert bluestein and all(r["diagnosis"] == "localised" for r in bluestein)


# -- issue 19: every pattern localised, in at most two lines per finding ----------------------------
#
# Sources: the DFT shift theorem (Oppenheim & Schafer, 3rd ed., Table 8.2), checked numerically
# with numpy.fft below for the inverse kinds; the mixed-radix decimation-in-time split
# X[q + s m] = sum_r w_p^(r s) W_N^(r q) S_r[q] (Cooley & Tukey 1965; Oppenheim & Schafer sec. 9.5,
# from memory), checked numerically against numpy.fft in test_the_mixed_radix_split_rebuilds_the_dft.

from fftgauge.harness.battery.localise import located, where_of  # noqa: E402
from fftgauge.harness.battery.radix_pass import pass_error  # noqa: E402
from fftgauge.harness.battery.reference import reference_transform  # noqa: E402


def test_the_mixed_radix_split_rebuilds_the_dft():
    for n, p in ((48, 3), (4096, 2), (35, 5)):
        x = _input(n)
        m, k = n // p, np.arange(n)
        rebuilt = sum(np.exp(-2j * np.pi * r * k / n) * np.fft.fft(x[r::p])[k % m] for r in range(p))
        assert np.allclose(rebuilt, _exact(x), rtol=0, atol=1e-9 * np.abs(_exact(x)).max())


def test_a_radix3_bug_at_n3_is_localised_not_precision():
    """The radix-3 butterfly constant sin(2 pi/3) written 0.8660: at n = 3 the error's size alone
    reads as float32's level under float64, but DC (the plain sum) is right to float64's limit."""
    case = Case("fft", "float64", 3)
    x = _input(3)
    y = bugs.radix3_rounded(x)
    truth = _exact(x)
    assert abs(y[0] - truth[0]) <= 1e-15 * np.linalg.norm(truth)  # DC uses no constant
    err = float(np.linalg.norm(y - truth) / np.linalg.norm(truth))
    assert _lower_precision_level(case, err, "float32")
    code, message = diag.diagnose(case, x, y)
    assert code == "localised", message
    where, likely = where_of(message)
    assert "rows 1..2 of a radix-3 butterfly" in where and "butterfly constant" in likely
    assert diag.diagnose(case, x, bugs.radix3_pass(x))[0] == "localised"


def test_the_radix3_pass_is_named_with_its_leg_and_its_butterfly():
    case = Case("fft", "float64", 48)
    x = _input(48)
    code, message = diag.diagnose(case, x, bugs.radix3_pass(x))
    assert code == "localised" and where_of(message)[0] == "leg 2 of the radix-3 pass: W_N^(k) for W_N^(2k)"
    code, message = diag.diagnose(case, x, bugs.radix3_rounded(x))
    where, likely = where_of(message)
    assert code == "localised" and where == "radix-3 butterfly entries (row, leg) (1,1), (1,2), (2,1), (2,2)"
    assert "too few digits" in likely and "2.5e-05" in likely  # 0.8660254 - 0.8660


def test_the_large_size_path_twiddle_table_is_named():
    case = Case("fft", "float64", 4096)
    x = _input(4096)
    code, message = diag.diagnose(case, x, bugs.large_path(x))
    where, likely = where_of(message)
    assert code == "localised" and where == "all 2048 twiddles of leg 1, radix-2 pass"
    assert likely == "the twiddle table is built for N/2 points, not N"


def test_a_right_output_gives_no_pass_error():
    case = Case("fft", "float64", 48)
    x = _input(48)
    truth = _exact(x)
    assert pass_error(case, x, truth, np.fft.fft(x), reference_transform) is None
    noisy = np.fft.fft(x.astype(np.complex64)).astype(np.complex128)  # rounding in float32: no one line
    assert pass_error(case, x, truth, noisy, reference_transform) is None


def test_time_shifts_of_the_inverses_with_the_inverse_sign():
    n = 64
    x = _input(n)
    t = np.arange(n)
    y = bugs.half_sample_ifft(x)
    assert np.allclose(y, np.fft.ifft(x) * np.exp(1j * np.pi * t / n))  # the + sign of the inverse
    code, message = diag.diagnose(Case("ifft", "float64", n), x, y)
    assert code == "time-shifted" and "estimated d = 0.5" in message and "exp(+2j pi t d / N)" in message
    for m in (64, 33):
        half = _input(m // 2 + 1)
        half[0] = half[0].real
        if m % 2 == 0:
            half[-1] = half[-1].real
        y = bugs.half_sample_irfft(half, m)
        k = np.arange(half.shape[0])
        # shift theorem: the forward transform of the output is the spectrum times exp(-j pi k / N)
        ok = slice(0, -1) if m % 2 == 0 else slice(None)
        assert np.allclose(np.fft.rfft(y)[ok], (half * np.exp(-1j * np.pi * k / m))[ok])
        code, message = diag.diagnose(Case("irfft", "float64", m), half, y)
        assert code == "time-shifted" and "estimated d = 0.5" in message, message


def test_a_located_message_reads_back():
    text = "relative rms error 3 eps: " + located("bins 1, 2", "a twiddle", "long account; with: colons.")
    assert where_of(text) == ("bins 1, 2", "a twiddle")
    assert where_of("no marker here") is None


#: Per broken FFT of the battery run below: what its finding's two lines must name (size rule on
#: the first line, where and the likely code on the second).
EXPECTED_FINDINGS = {
    "radix3_pass": ("localised", "sizes: n divisible by 3", "radix-3"),
    "radix3_rounded": ("localised", "sizes: n divisible by 3", "radix-3 butterfly"),
    "bluestein_padding": ("localised", "sizes: n prime and n > 61", "bin k = 0 only; likely: a loop bound one short"),
    "large_path": ("localised", "sizes: n even and n > 128", "twiddle table is built for N/2 points"),
    "radix2_last_twiddle": ("localised", "sizes: n > 2",
                            "bins N/2-1, N-1 (last stage's last butterfly); likely: the twiddle index of the last "
                            "stage runs one past the table"),
    "half_sample": ("time-shifted", "sizes: n > 1", "delayed by half a sample; likely: a half-sample offset"),
    "half_sample_ifft[kind=ifft]": ("time-shifted", "sizes: n > 1", "delayed by half a bin"),
    "half_sample_irfft[kind=irfft]": ("time-shifted", "sizes: n > 1", "delayed by half a sample"),
    "real_fast_path": ("localised", "sizes: n > 2", ("upper half of the spectrum only", "likely: X[N-k] = conj X[k]")),
    "aliased_output": ("output-aliased", "fails at every size tried", "likely: the function returns its internal output "
                                                                        "buffer"),
    "odd_real[kind=rfft]": ("localised", "sizes: n odd, n > 1", "of odd N only; likely: the odd-N branch treats the "
                                                                 "last bin as a Nyquist bin"),
    "no_rule": ("localised", "no size rule fits", "2 of 5 bins"),
}


def finding_parts(entry: str) -> tuple[str, str]:
    """Return a terminal finding's two parts unwrapped (harness/report/findings.py: part 2
    starts at the line indented four spaces; continuation lines are indented six)."""
    parts: list[list[str]] = []
    for line in entry.split("\n"):
        if not parts or (line.startswith("    ") and not line.startswith("      ")):
            parts.append([line])
        else:
            parts[-1].append(line.strip())
    assert len(parts) == 2, entry
    return " ".join(parts[0]), " ".join(parts[1])


def test_every_pattern_is_a_finding_in_two_parts_naming_rule_and_place():
    from fftgauge.harness.battery import run as battery
    from fftgauge.harness.report.check_tables import finding_lines, format_summary, rows_frame
    from fftgauge.harness.report.findings import summary_width

    specs = tuple(f"{DATA}:{name}" for name in EXPECTED_FINDINGS) + ("numpy", "scipy", "pyfftw")
    sizes = tuple(range(1, 17)) + (22, 39, 56, 61, 67, 97, 101, 128, 4093, 4096, 5000, 6561)  # 6561: odd, passes
    req = battery.BatteryRequest(specs=specs, kinds=None, dtypes=("float64",), sizes=sizes,
                                 checks=("accuracy", "symmetry", "repeatable"))
    doc = battery.run_battery(req, quiet=True)
    width = summary_width()
    entries = finding_lines(doc["rows"])
    for entry in entries:  # wrapped at the width, a word longer than the room left alone on its line
        assert all(len(line) <= width or " " not in line.strip() for line in entry.split("\n")), entry
    for name, (cause, rule, place) in EXPECTED_FINDINGS.items():
        mine = [e for e in entries if e.startswith(f"  localised_bugs:{name} · {cause} ")]
        assert len(mine) == 1, (name, [e for e in entries if f":{name} " in e])
        first, second = finding_parts(mine[0])
        assert rule in first, mine[0]
        assert all(part in second for part in ((place,) if isinstance(place, str) else place)), mine[0]
    text = format_summary(rows_frame(doc["rows"]))
    for library in ("numpy", "scipy", "pyfftw"):  # they pass: no finding, no size pattern, no located message
        assert not any(e.startswith(f"  {library} ") for e in entries)
        assert f"  {library} · " not in text
        assert not any("where: " in str(r["message"]) for r in doc["rows"] if r["backend"] == library)
