"""Fixed-point (q15/q31): formats, metrics, the radix-2 reference, the checks and verdicts.

Sources, beside each test: IEEE Std 1241 for ENOB; common practice for the ideal
quantiser's SQNR; Oppenheim & Schafer, Discrete-Time Signal Processing, 3rd ed., section 9.7
for the growth of the scaled radix-2's noise with N; an exact rational implementation
written for the tests (tests/data/fixed_point_ffts.py, Fractions and mpmath) for the
reference's arithmetic bit for bit.
"""

from __future__ import annotations

import math
import sys
from fractions import Fraction
from pathlib import Path

import numpy as np
import pytest

from fftgauge.harness.cases import Case
from fftgauge.harness.fixed.checks import fixed_check_case
from fftgauge.harness.fixed.declared import FixedScaling
from fftgauge.harness.fixed.formats import FORMATS, handle_overflow, quantise, shift_right
from fftgauge.harness.fixed.measure import exact_output
from fftgauge.harness.fixed.metrics import enob_from_sinad, ideal_sqnr_db, measure, sqnr_db
from fftgauge.harness.fixed.radix2 import SCALINGS, FixedRadix2

sys.path.insert(0, str(Path(__file__).parent / "data"))
import fixed_point_ffts as twins  # noqa: E402

Q15, Q31 = FORMATS["q15"], FORMATS["q31"]


# -- formats -------------------------------------------------------------------------------

@pytest.mark.parametrize("rounding", ["truncate", "round-half-up", "convergent"])
def test_shift_right_matches_exact_rationals(rounding):
    """Each rounding rule against its definition on exact rationals (floor; floor(q + 1/2);
    Python's round of a Fraction, half to even), ties included."""
    rng = np.random.default_rng(3)
    values = list(rng.integers(-(1 << 62), 1 << 62, 300)) + list(range(-40, 41))
    for shift in (1, 2, 5, 15, 31):
        got = shift_right(np.array(values, dtype=np.int64), shift, rounding)
        want = [twins.rshift(int(v), shift, rounding) for v in values]
        assert got.tolist() == want


def test_wrap_and_saturate_match_twos_complement():
    """Wrap-around is arithmetic modulo 2**16 into [-32768, 32767]; saturation clips
    (two's complement, common practice)."""
    values = np.array([-70000, -32769, -32768, 0, 32767, 32768, 65535, 100000], dtype=np.int64)
    assert handle_overflow(values, Q15, "wrap").tolist() == [twins.fit(int(v), 16, "wrap") for v in values]
    assert handle_overflow(values, Q15, "wrap").tolist()[4:6] == [32767, -32768]
    assert handle_overflow(values, Q15, "saturate").tolist() == [-32768, -32768, -32768, 0, 32767, 32767, 32767, 32767]


def test_quantise_layout_and_rails():
    """Complex data is (n, 2) pairs (re, im), interleaved in C order; 1.0 saturates to 32767."""
    q = quantise(np.array([0.5 - 0.25j, 1.0 + 1j, -1.0]), Q15)
    assert q.dtype == np.int16 and q.shape == (3, 2)
    assert q.tolist() == [[16384, -8192], [32767, 32767], [-32768, 0]]
    assert q.reshape(-1).tolist()[:2] == [16384, -8192]


# -- metrics -------------------------------------------------------------------------------

def test_enob_constants_and_inverse():
    """IEEE Std 1241: ENOB = (SINAD - 1.76)/6.02 (from memory): 1.76 dB is 10 log10(3/2) and
    6.02 dB is 20 log10 2 to two decimals; the ideal quantiser's 6.02 b + 1.76 gives b back."""
    assert round(10 * math.log10(1.5), 2) == 1.76
    assert round(20 * math.log10(2), 2) == 6.02
    for b in (8, 12, 16, 32):
        assert enob_from_sinad(ideal_sqnr_db(b)) == pytest.approx(b)


def test_ideal_quantiser_of_a_full_scale_sine():
    """Common practice: an ideal b-bit quantiser gives SQNR 6.02 b + 1.76 dB on a full-scale
    sine; Q15 (16 bits) by simulation, within 0.1 dB."""
    n = 1 << 16
    t = np.arange(n)
    x = (1 - 2.0 ** -15) * np.sin(2 * np.pi * 0.1234567 * t)
    q = quantise(x, Q15)[:, 0] / 2.0 ** 15
    assert sqnr_db(x, q) == pytest.approx(ideal_sqnr_db(16), abs=0.1)


def test_measure_counts_rails_and_wraps():
    """A saturated part sits at a rail; a wrapped part lies a whole range away from where
    clipping puts it (definitions of docs/fixed-point.md)."""
    exact = np.array([40000 + 0j, 100 + 0j, -50000 + 0j])
    saturated = np.array([[32767, 0], [100, 0], [-32768, 0]])
    wrapped = np.array([[40000 - 65536, 0], [100, 0], [-32768, 0]])
    assert (measure(saturated, exact, Q15).at_rails, measure(saturated, exact, Q15).wrapped) == (2, 0)
    assert (measure(wrapped, exact, Q15).at_rails, measure(wrapped, exact, Q15).wrapped) == (1, 1)


# -- the reference --------------------------------------------------------------------------

@pytest.mark.parametrize("fmt", [Q15, Q31], ids=["q15", "q31"])
@pytest.mark.parametrize("scaling", SCALINGS)
def test_reference_matches_exact_rational_radix2(fmt, scaling):
    """Bit for bit against tests/data/fixed_point_ffts.py (exact rationals, mpmath twiddles)
    at N = 1..16, every rounding and overflow rule, full-scale random inputs (so the
    unscaled one overflows), and 8-bit twiddles."""
    rng = np.random.default_rng(11)
    for n in (1, 2, 4, 8, 16):
        z = rng.uniform(-1, 1, n) + 1j * rng.uniform(-1, 1, n)
        x = quantise(z / max(1.0, np.max(np.abs(z))) * 0.999, fmt)
        for rounding in ("truncate", "round-half-up", "convergent"):
            for overflow, tb in (("saturate", None), ("wrap", None), ("saturate", 8)):
                ref = FixedRadix2(fmt, scaling, rounding, overflow, tb).transform(x)
                want, exp = twins.scalar_fft([(int(a), int(b)) for a, b in x], fmt.bits, scaling, rounding,
                                             overflow, tb)
                assert ref.pairs.tolist() == [list(p) for p in want], (n, rounding, overflow, tb)
                assert ref.exponent == exp


def uniform_input(n: int, fmt, seed: int) -> np.ndarray:
    """White input with real and imaginary parts uniform on (-1/sqrt 2, 1/sqrt 2), |x| < 1."""
    rng = np.random.default_rng(seed)
    a = 1 / math.sqrt(2)
    return quantise(rng.uniform(-a, a, n) + 1j * rng.uniform(-a, a, n), fmt)


@pytest.mark.parametrize("fmt", [Q15, Q31], ids=["q15", "q31"])
@pytest.mark.parametrize("scaling,slope", [("stage", -10 * math.log10(2)), ("input", -20 * math.log10(2))])
def test_sqnr_slope_against_n_follows_oppenheim_schafer(fmt, scaling, slope):
    """Oppenheim & Schafer, 3rd ed., section 9.7 (from memory): with 1/2 per stage the
    output noise-to-signal ratio grows like N (about 3.01 dB lost per doubling); with all
    the scaling at the input, like N^2 (6.02 dB). Simulated: white input with |x| < 1,
    N = 16..16384, three seeds each, least-squares slope of SQNR against log2 N; tolerance
    0.25 dB per doubling (the simulation gives -3.01..-3.07 and -5.99..-6.04)."""
    logs, means = [], []
    for t in range(4, 15):
        n = 1 << t
        values = []
        for seed in range(3):
            x = uniform_input(n, fmt, seed)
            r = FixedRadix2(fmt, scaling, "round-half-up").transform(x)
            values.append(sqnr_db(exact_output(x, r.exponent), r.pairs[:, 0] + 1j * r.pairs[:, 1].astype(float)))
        logs.append(t)
        means.append(np.mean(values))
    assert np.polyfit(logs, means, 1)[0] == pytest.approx(slope, abs=0.25)


def test_stage_scaling_is_safe_below_full_magnitude():
    """With 1/2 per stage, |a + W b| / 2 <= max(|a|, |b|): an input with |x| < 1 never reaches
    the rails (Oppenheim & Schafer, 3rd ed., section 9.7, from memory); checked at N = 1024."""
    x = uniform_input(1024, Q15, 5)
    out = FixedRadix2(Q15, "stage").transform(x).pairs
    assert measure(out, exact_output(x, 10), Q15).at_rails == 0


# -- the checks: broken twins caught and diagnosed -------------------------------------------

CASE = Case("fft", "q15", 64)


def rows_of(backend_cls, case=CASE, margin_db=1.0):
    return {r.check: r for r in fixed_check_case(backend_cls(), case, 1234, margin_db)}


@pytest.mark.parametrize("cls", [twins.ScalarQ15, twins.ScalarQ15Convergent])
def test_correct_scalar_routines_pass(cls):
    """Independent correct routines (exact-rational rounding) pass both checks."""
    rows = rows_of(cls)
    assert [rows[c].status for c in ("sqnr", "overflow", "input-intact", "repeatable")] == ["pass"] * 4, \
        [r.message for r in rows.values()]
    assert rows["sqnr"].value <= 1.0 and rows["sqnr"].limit == 1.0


@pytest.mark.parametrize("cls,check,code", [
    (twins.WrongShift, "sqnr", "scaling-shift"),
    (twins.NoSaturation, "overflow", "overflow"),
    (twins.Truncating, "sqnr", "rounding"),
    (twins.EightBitTwiddles, "sqnr", "twiddle-bits"),
])
def test_broken_twins_are_caught_and_diagnosed(cls, check, code):
    """Each bug of tests/data/fixed_point_ffts.py fails its check with its own diagnosis."""
    row = rows_of(cls)[check]
    assert (row.status, row.diagnosis) == ("fail", code), row.message


def test_margin_decides_the_truncating_twin():
    """Truncation costs about 2.5 dB on noise (measured here): a 4 dB margin accepts it, and
    the message says by how much it is worse than the reference."""
    strict, loose = rows_of(twins.Truncating)["sqnr"], rows_of(twins.Truncating, margin_db=4.0)["sqnr"]
    assert 1.0 < strict.value < 4.0 and loose.status == "pass"
    assert "dB worse than a radix-2 q15, 1/2 per stage, round-half-up" in strict.message


@pytest.mark.parametrize("cls,check,code", [(twins.ModifiesInput, "input-intact", "input-modified"),
                                            (twins.Nondeterministic, "repeatable", "nondeterministic")])
def test_behaviour_checks_of_fixed_cases(cls, check, code):
    """input-intact and repeatable hold for q15 cases as for float ones (contract codes)."""
    rows = rows_of(cls)
    assert (rows[check].status, rows[check].diagnosis) == ("fail", code), rows[check].message
    assert all(r.status == "pass" for name, r in rows_of(twins.ScalarQ15).items() if name != "round-trip")


def test_no_saturation_message_names_the_level():
    row = rows_of(twins.NoSaturation)["overflow"]
    assert "wraps around from" in row.message and row.value > row.limit


@pytest.mark.parametrize("cls,status", [(twins.ReturnsFloats, "fail"), (twins.OutOfRange, "error"),
                                        (twins.Undeclared, "error")])
def test_bad_outputs_and_declarations(cls, status):
    """Floats: fail (dtype); values beyond the rails or no declared scaling: error rows."""
    rows = list(rows_of(cls).values())
    assert {r.status for r in rows} == {status}, [r.message for r in rows]
    if cls is twins.ReturnsFloats:
        assert rows[0].diagnosis == "dtype"
    assert rows[0].message


def test_battery_skips_q15_on_a_float_backend():
    """A float-only backend asked for q15 gives skip rows with the reason (the battery's
    check_case branches to the fixed-point checks)."""
    from fftgauge.backends.registry import load_backend
    from fftgauge.harness.battery.checks import check_case

    rows = check_case(load_backend("numpy"), Case("fft", "q15", 16), 1)
    assert rows and {r.status for r in rows} == {"skip"} and "q15" in rows[0].message


def test_fixed_scaling_validation():
    assert FixedScaling("log2n").scaling == "stage" and FixedScaling(0).scaling == "none"
    assert FixedScaling("block").shift_at(64) is None and FixedScaling("log2n").shift_at(64) == 6
    for bad in ({"output_shift": -1}, {"output_shift": "half"}, {"output_shift": 1, "rounding": "up"}):
        with pytest.raises(ValueError):
            FixedScaling(**bad)


def test_limit_option_sets_the_margin():
    """``--limit sqnr=4dB`` is the margin: criteria.apply_limits judges the truncating twin's
    sqnr row (about 2.5 dB short) in the parent; a strict 0.5 dB fails a pass made at 10 dB."""
    from fftgauge.harness.battery.criteria import apply_limits, parse_limit_option
    from fftgauge.harness.errors import UsageError

    failing = rows_of(twins.Truncating)["sqnr"].as_dict()
    assert "the shortfall points to rounding" in failing["message"]
    loose = apply_limits([failing], [parse_limit_option("sqnr=4dB")])[0]
    assert (loose["status"], loose["limit"], loose["limit_source"]) == ("pass", 4.0, "user")
    passing = rows_of(twins.Truncating, margin_db=10.0)["sqnr"].as_dict()
    strict = apply_limits([passing], [parse_limit_option("sqnr=0.5dB")])[0]
    assert (strict["status"], strict["diagnosis"]) == ("fail", "user-limit")
    for bad in ("sqnr=3eps", "sqnr=-1dB"):
        with pytest.raises(UsageError):
            parse_limit_option(bad)


# -- CMSIS-DSP (optional: pip install 'fftgauge[cmsis]') -------------------------------------

def test_cmsis_sizes_and_documented_output_shift():
    """CMSIS-DSP documents its CFFT sizes (16..4096) and, per size, the Q15/Q31 output format
    (a 1.15 input gives (log2 N + 1).(15 - log2 N): 'number of bits to upscale' log2 N).
    An impulse of 0.5 must then come out as 0.5 / N in every bin, within 2 LSB (measured:
    exact in bin 0, 1 LSB low (Q15) and 1-2 LSB low (Q31) elsewhere: multiplications by the
    largest twiddle, just below 1.0, rounded down)."""
    dsp = pytest.importorskip("cmsisdsp")
    from fftgauge.backends.cmsis_dsp import CmsisDspBackend

    assert dsp.arm_cfft_init_q15(dsp.arm_cfft_instance_q15(), 8) != 0
    assert dsp.arm_cfft_init_q15(dsp.arm_cfft_instance_q15(), 8192) != 0
    for dtype, fmt in (("q15", Q15), ("q31", Q31)):
        for n in (16, 64, 1024):
            x = np.zeros((n, 2), dtype=fmt.dtype)
            x[0, 0] = fmt.one // 2
            y = CmsisDspBackend().plan(Case("fft", dtype, n)).execute(x).astype(np.int64)
            assert np.max(np.abs(y[:, 0] - fmt.one // 2 // n)) <= 2 and np.max(np.abs(y[:, 1])) <= 2


def test_cmsis_q31_wraps_around_on_a_full_scale_tone():
    """Found by the overflow check and verified here: arm_cfft_q31 at N = 256 on a complex
    tone at 0 dBFS (bin 65) returns a large negative real part in bin 65 where the exact
    output is +1.0 (just above the largest Q31 value): a wrap-around, not a saturation. At
    -1 dBFS it is right."""
    pytest.importorskip("cmsisdsp")
    from fftgauge.backends.cmsis_dsp import CmsisDspBackend
    from fftgauge.harness.fixed.signals import test_signal

    plan = CmsisDspBackend().plan(Case("fft", "q31", 256))
    for level, wrapped in ((0.0, True), (-1.0, False)):
        x = test_signal("tone", 256, level, Q31, 1234)
        y = plan.execute(x).astype(np.int64)
        exact = exact_output(x, 8)
        assert (y[65, 0] < 0) == wrapped and float(exact[65].real) > 0
    row = {r.check: r for r in fixed_check_case(CmsisDspBackend(), Case("fft", "q31", 256), 1234)}["overflow"]
    assert (row.status, row.diagnosis) == ("fail", "overflow")


# -- the reference as a backend, and the command line ---------------------------------------

def test_radix2_fixed_backend_declares_its_shift_and_bfp_passes():
    """The adapter declares the shift its scaling implies; block floating point returns
    (pairs, exponent) and passes against its own reference; a block backend that returns one
    array gives error rows."""
    from fftgauge.backends.fixed_radix2 import FixedRadix2Backend

    assert FixedRadix2Backend().capabilities().fixed.shift_at(1024) == 10
    assert FixedRadix2Backend(scaling="none").capabilities().fixed.shift_at(1024) == 0
    bfp = FixedRadix2Backend(scaling="bfp")
    assert {r.status for r in fixed_check_case(bfp, Case("fft", "q31", 256), 7) if r.check != "round-trip"} == {"pass"}

    class OneArray(FixedRadix2Backend):
        def plan(self, case):
            fft = self.transform_of(case.dtype)
            return twins.FunctionPlan(case, lambda x: fft.transform(x).pairs)

    rows = fixed_check_case(OneArray(scaling="bfp"), Case("fft", "q15", 64), 7)
    assert {r.status for r in rows} == {"error"} and "exponent" in rows[0].message


@pytest.mark.slow
def test_command_line_on_q15(tmp_path):
    """End to end: the reference passes (exit 0); the truncating twin, loaded from its file,
    fails sqnr with diagnosis rounding (exit 1); --limit sqnr=4dB lets it pass (exit 0)."""
    import json
    import subprocess

    root = Path(__file__).resolve().parent.parent
    exe = [sys.executable, "-m", "fftgauge", "check", "--dtypes", "q15", "--kinds", "fft", "--sizes", "64", "--quiet"]
    good = subprocess.run(exe + ["--backend", "fftgauge.backends.fixed_radix2:FixedRadix2Backend",
                                 "--json", str(tmp_path / "a.json")], cwd=root, capture_output=True, text=True)
    assert good.returncode == 0, good.stdout + good.stderr
    twin = f"{root / 'tests' / 'data' / 'fixed_point_ffts.py'}:Truncating"
    bad = subprocess.run(exe + ["--backend", twin, "--json", str(tmp_path / "b.json")], cwd=root,
                         capture_output=True, text=True)
    assert bad.returncode == 1, bad.stdout + bad.stderr
    rows = {r["check"]: r for r in json.loads((tmp_path / "b.json").read_text())["rows"]}
    assert (rows["sqnr"]["status"], rows["sqnr"]["diagnosis"]) == ("fail", "rounding")
    loose = subprocess.run(exe + ["--backend", twin, "--limit", "sqnr=4dB"], cwd=root, capture_output=True, text=True)
    assert loose.returncode == 0, loose.stdout + loose.stderr


def declaring(declared, **computes):
    """Return the radix2-fixed backend computing with ``computes`` but declaring ``declared``."""
    import dataclasses

    from fftgauge.backends.fixed_radix2 import FixedRadix2Backend

    class Declaring(FixedRadix2Backend):
        def capabilities(self):
            return dataclasses.replace(super().capabilities(), fixed=declared)
    return Declaring(**computes)


ROUND = FixedScaling("log2n", "stage", "round-half-up")


@pytest.mark.parametrize("dtype", ["q15", "q31"])
@pytest.mark.parametrize("n", [16, 1024])
@pytest.mark.parametrize("computes,declared,check,code", [
    ({"rounding": "truncate"}, ROUND, "sqnr", "rounding"),
    ({"twiddle_bits": 8}, ROUND, "sqnr", "twiddle-bits"),
    ({"scaling": "none"}, ROUND, "sqnr", "scaling-shift"),
    ({"scaling": "none", "overflow": "wrap"}, FixedScaling(0, "none"), "overflow", "overflow"),
    ({"overflow": "wrap"}, ROUND, "overflow", "overflow"),
    ({"rounding": "convergent"}, FixedScaling("log2n", "stage", "convergent"), None, None),
], ids=["truncates", "8-bit-twiddles", "no-scaling", "wraps", "stage-wraps", "correct"])
def test_diagnoses_hold_across_sizes_and_formats(dtype, n, computes, declared, check, code):
    """The same bugs in the vectorised radix-2 at N = 16 and 1024, in Q15 and Q31: caught with
    their codes; a correct convergent routine passes every check."""
    rows = {r.check: r for r in fixed_check_case(declaring(declared, **computes), Case("fft", dtype, n), 99)}
    if check is None:
        assert all(r.status == "pass" for r in rows.values() if r.check != "round-trip"), [r.message for r in rows.values()]
    else:
        assert (rows[check].status, rows[check].diagnosis) == ("fail", code), rows[check].message


def test_cmsis_q31_wraps_on_the_overload_input_and_q15_saturates():
    """Found by the overflow check's overload input (corners at 0 dBFS: the exact bin N/8 is
    (1 + sqrt 2)/2 = 1.207 of full scale, beyond Q31) and verified here: arm_cfft_q31 returns
    that part minus 2**32 (a two's-complement wrap) at N = 16 and 1024, and the check fails
    it with overflow; arm_cfft_q15 passes the check (it saturates)."""
    pytest.importorskip("cmsisdsp")
    from fftgauge.backends.cmsis_dsp import CmsisDspBackend
    from fftgauge.harness.fixed.signals import test_signal

    for n in (16, 1024):
        x = test_signal("corners", n, 0.0, Q31, 0)
        y = CmsisDspBackend().plan(Case("fft", "q31", n)).execute(x).astype(np.int64)
        exact = float(exact_output(x, n.bit_length() - 1)[n // 8].real)
        assert exact == pytest.approx((1 + math.sqrt(2)) / 2 * 2 ** 31, rel=1e-6)
        assert abs(y[n // 8, 0] - (exact - 2 ** 32)) <= 64  # its usual error: 17 LSB here
        rows = {r.check: r for r in fixed_check_case(CmsisDspBackend(), Case("fft", "q31", n), 1234)}
        assert (rows["overflow"].status, rows["overflow"].diagnosis) == ("fail", "overflow")
        q15 = {r.check: r for r in fixed_check_case(CmsisDspBackend(), Case("fft", "q15", n), 1234)}
        assert q15["overflow"].status == "pass", q15["overflow"].message


# -- a C routine through clib: (examples/c_radix2/radix2_q15.c) -----------------------------

@pytest.fixture(scope="module")
def q15_libraries(tmp_path_factory):
    """Build examples/c_radix2/radix2_q15.c and its -DMISSING_SATURATION twin."""
    import shutil
    import subprocess

    cc = next((shutil.which(c) for c in ("cc", "gcc", "clang") if shutil.which(c)), None)
    if cc is None:
        pytest.skip("no C compiler")
    src = Path(__file__).resolve().parent.parent / "examples" / "c_radix2" / "radix2_q15.c"
    out = tmp_path_factory.mktemp("q15")
    built = {}
    for name, flags in (("good", []), ("broken", ["-DMISSING_SATURATION"])):
        lib = out / f"libradix2_q15_{name}.so"
        subprocess.run([cc, "-O2", "-std=c99", "-Wall", "-Wextra", "-pedantic", *flags, "-fPIC", "-shared",
                        "-o", str(lib), str(src), "-lm"], check=True)
        built[name] = lib
    return built


def clib_q15(lib, extra=",output_shift=log2n"):
    from fftgauge.backends.registry import load_backend
    return load_backend(f"clib:{lib}:radix2_q15[dtype=q15,sizes=pow2{extra}]")


def test_c_q15_routine_matches_the_reference_bit_for_bit(q15_libraries):
    """The C routine (1/2 per stage, round half up, saturation) and harness/fixed/radix2.py
    are the same arithmetic: equal outputs for random full-scale inputs at N = 1..4096."""
    backend = clib_q15(q15_libraries["good"])
    rng = np.random.default_rng(2)
    for t in range(13):
        n = 1 << t
        x = quantise((rng.uniform(-1, 1, n) + 1j * rng.uniform(-1, 1, n)) * 0.7, Q15)
        got = np.asarray(backend.plan(Case("fft", "q15", n)).execute(x)).reshape(n, 2)
        assert np.array_equal(got, FixedRadix2(Q15, "stage", "round-half-up").transform(x).pairs), n


def test_c_q15_routine_passes_and_its_twin_without_saturation_fails(q15_libraries):
    for n in (16, 1024):
        good = {r.check: r for r in fixed_check_case(clib_q15(q15_libraries["good"]), Case("fft", "q15", n), 5)}
        assert {r.status for r in good.values() if r.check != "round-trip"} == {"pass"}, [r.message for r in good.values()]
        bad = {r.check: r for r in fixed_check_case(clib_q15(q15_libraries["broken"]), Case("fft", "q15", n), 5)}
        assert (bad["overflow"].status, bad["overflow"].diagnosis) == ("fail", "overflow")
        assert "sums wrap around inside" in bad["overflow"].message


def test_clib_q15_without_or_with_a_bad_shift(q15_libraries):
    """No output_shift: error rows naming the missing declaration; a malformed one: exit-2 error."""
    from fftgauge.harness.errors import UsageError

    rows = fixed_check_case(clib_q15(q15_libraries["good"], extra=""), Case("fft", "q15", 16), 5)
    assert {r.status for r in rows} == {"error"} and "declares no fixed-point scaling" in rows[0].message
    with pytest.raises(UsageError, match="output_shift"):
        clib_q15(q15_libraries["good"], extra=",output_shift=half")


def test_cmsis_real_fft_packing_and_sizes():
    """arm_rfft_fast_f32 packs X0.re, X(N/2).re, X1.re, X1.im, ... (dc-nyquist, as declared),
    against scipy on long double (harness reference); its init refuses 16 and 8192."""
    dsp = pytest.importorskip("cmsisdsp")
    from fftgauge.backends.cmsis_dsp import CmsisDspBackend
    from fftgauge.harness.battery.reference import reference_transform

    assert dsp.arm_rfft_fast_init_f32(dsp.arm_rfft_fast_instance_f32(), 16) != 0
    assert dsp.arm_rfft_fast_init_f32(dsp.arm_rfft_fast_instance_f32(), 8192) != 0
    n = 64
    x = np.random.default_rng(4).standard_normal(n).astype(np.float32)
    got = CmsisDspBackend().plan(Case("rfft", "float32", n)).execute(x.copy())
    ref = reference_transform(x.astype(np.float64), Case("rfft", "float64", n)).hi
    want = np.concatenate([[ref[0].real, ref[n // 2].real], np.stack([ref[1:n // 2].real, ref[1:n // 2].imag], -1).ravel()])
    assert np.max(np.abs(got - want)) < 1e-4 * np.max(np.abs(want))
    back = CmsisDspBackend().plan(Case("irfft", "float32", n)).execute(got)
    assert np.max(np.abs(back - x)) < 1e-5
