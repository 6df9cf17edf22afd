"""Tests of the bug diagnosis (harness/diagnosis.py).

Each test builds a wrong output the way a classic bug does (with numpy.fft, an independent
double-precision implementation, as the wrong backend's engine) and checks that
:func:`diagnose` names that bug. The ground truth inside ``diagnose`` is the project's
reference (scipy.fft on clongdouble); the bit-reversal permutation is checked against its
definition written out independently.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from fftgauge.backends.registry import load_backend
from fftgauge.harness.cases import Case
from fftgauge.harness.battery.checks import check_case
from fftgauge.harness.battery.diagnosis import diagnose, diagnose_round_trip, factor_name
from fftgauge.harness.dft import bit_reversal_permutation
from fftgauge.harness.battery.inputs import case_rng, random_input

BROKEN = str(Path(__file__).parent / "data" / "broken_ffts.py")


def rand(case: Case, seed: int = 1) -> np.ndarray:
    return random_input(case, case_rng(seed, case, "diagnosis-test"))


def np_transform(case: Case, x: np.ndarray, n: int | None = None) -> np.ndarray:
    return getattr(np.fft, case.kind)(x, n=n or case.n, norm=case.norm)


def test_bit_reversal_permutation_matches_its_definition():
    for t in range(0, 8):
        n = 2**t
        want = [int(format(k, f"0{t}b")[::-1], 2) if t else 0 for k in range(n)]
        assert list(bit_reversal_permutation(n)) == want


def test_factor_names():
    assert factor_name(64.0, 64) == "N"
    assert factor_name(1 / 64, 64) == "1/N"
    assert factor_name(8.0, 64) == "sqrt(N)"
    assert factor_name(0.125, 64) == "1/sqrt(N)"
    assert factor_name(1.0, 64) == "1"
    assert factor_name(2.5, 64) == "2.5"


@pytest.mark.parametrize("kind", ["fft", "ifft", "rfft", "irfft"])
@pytest.mark.parametrize("n", [16, 45])
def test_scale(kind, n):
    case = Case(kind, "float64", n)
    x = rand(case)
    y = np_transform(case, x)
    for factor, words in ((n, "N times too large"), (1 / n, "N times too small"),
                          (np.sqrt(n), "sqrt(N) times too large"), (1 / np.sqrt(n), "sqrt(N) times too small")):
        code, msg = diagnose(case, x, y * factor)
        assert code == "scale" and words in msg, msg


def test_missing_inverse_scale_is_named():
    case = Case("ifft", "float64", 32)
    x = rand(case)
    code, msg = diagnose(case, x, np.fft.ifft(x) * 32)
    assert code == "scale"
    assert "N times too large" in msg and "the 1/N of the inverse transform is missing" in msg


@pytest.mark.parametrize("kind", ["fft", "ifft", "rfft", "irfft"])
def test_sign(kind):
    case = Case(kind, "float64", 24)
    x = rand(case)
    y = np_transform(case, x)
    if kind in ("fft", "ifft"):
        wrong = y[(-np.arange(24)) % 24]          # opposite exponent sign
        assert diagnose(case, x, wrong)[0] == "sign"
        assert diagnose(case, x, np.conj(y))[0] == "sign"
    elif kind == "rfft":
        assert diagnose(case, x, np.conj(y))[0] == "sign"
    else:
        assert diagnose(case, x, y[(-np.arange(24)) % 24])[0] == "sign"


def test_inverse_computed_for_forward_is_sign_with_scale():
    case = Case("fft", "float64", 20)
    x = rand(case)
    code, msg = diagnose(case, x, np.fft.ifft(x))
    assert code == "sign" and "scaled by 1/N" in msg


@pytest.mark.parametrize("kind", ["fft", "ifft", "rfft", "irfft"])
def test_bit_reversed(kind):
    n = 32
    case = Case(kind, "float64", n)
    x = rand(case)
    perm = bit_reversal_permutation(n)
    if kind == "rfft":
        wrong = np.fft.fft(x)[perm][: n // 2 + 1]
    else:
        wrong = np_transform(case, x)[perm]
    code, msg = diagnose(case, x, wrong)
    assert code == "bit-reversed" and "bit-reversed order" in msg


@pytest.mark.parametrize("n", [16, 17])
def test_shifted(n):
    case = Case("fft", "float64", n)
    x = rand(case)
    y = np.fft.fft(x)
    code, msg = diagnose(case, x, np.fft.fftshift(y))
    assert code == "shifted" and f"by {n // 2} bins" in msg and "fftshift" in msg
    code, msg = diagnose(case, x, np.roll(y, 5))
    assert code == "shifted" and "by 5 bins" in msg


def test_precision():
    case = Case("fft", "float64", 128)
    x = rand(case)
    wrong = np.fft.fft(x.astype(np.complex64)).astype(np.complex128)
    code, msg = diagnose(case, x, wrong)
    assert code == "precision" and "float32" in msg


def test_lower_precision_output_dtype():
    case = Case("rfft", "float64", 100)
    x = rand(case)
    code, msg = diagnose(case, x, np.fft.rfft(x).astype(np.complex64))
    assert code == "dtype" and "complex64" in msg


def test_precision_is_not_claimed_for_modest_inaccuracy():
    """An error of a few hundred eps (bad twiddles, say) is not at float32's level."""
    case = Case("fft", "float64", 64)
    x = rand(case)
    y = np.fft.fft(x)
    noise = np.random.default_rng(0).standard_normal(64) * 300 * 2.0**-52 * np.abs(y).mean()
    assert diagnose(case, x, y + noise)[0] == "unknown"


@pytest.mark.parametrize("kind", ["fft", "ifft", "rfft", "irfft"])
def test_truncated_size_longer_output(kind):
    n = 100
    case = Case(kind, "float64", n)
    x = rand(case)
    wrong = np_transform(case, x, n=128)
    code, msg = diagnose(case, x, wrong)
    assert code == "truncated-size" and "128" in msg


def test_truncated_size_same_length():
    case = Case("fft", "float64", 100)
    x = rand(case)
    code, msg = diagnose(case, x, np.fft.fft(x, 128)[:100])
    assert code == "truncated-size" and "zero-padded to 128" in msg
    code, msg = diagnose(case, x, np.fft.fft(np.concatenate([x[:64], np.zeros(36)])))
    assert code == "truncated-size" and "truncated" in msg


def test_real_only():
    for kind in ("fft", "ifft", "irfft"):
        case = Case(kind, "float64", 30)
        x = rand(case)
        code, msg = diagnose(case, x, np_transform(case, x.real.astype(x.dtype)))
        assert code == "real-only" and "imaginary part" in msg, (kind, msg)


def test_shape_and_dtype_and_nonfinite():
    case = Case("fft", "float64", 16)
    x = rand(case)
    y = np.fft.fft(x)
    assert diagnose(case, x, y[:-1])[0] == "shape"
    assert diagnose(case, x, y.reshape(4, 4))[0] == "shape"
    assert diagnose(case, x, y.astype(object))[0] == "dtype"
    assert diagnose(case, x, np.abs(y).astype(np.int64))[0] == "dtype"
    bad = y.copy()
    bad[3] = np.nan
    assert diagnose(case, x, bad)[0] == "nonfinite"


def test_unknown():
    case = Case("fft", "float64", 64)
    x = rand(case)
    code, msg = diagnose(case, x, np.fft.fft(x) + 1.0)
    assert code == "unknown" and "no single common bug" in msg


def test_structured_coincidences_do_not_mislead_at_tiny_sizes():
    """At n = 1 and 2 reversal, bit reversal and some shifts coincide with the truth; a scale
    bug is still called a scale bug."""
    for n in (1, 2):
        case = Case("ifft", "float64", n)
        x = rand(case)
        if n == 1:
            continue  # every normalisation is 1: nothing can be wrong by a factor
        assert diagnose(case, x, np.fft.ifft(x) * n)[0] == "scale"


def test_round_trip_diagnosis():
    x = np.random.default_rng(2).standard_normal(16) + 0j
    assert diagnose_round_trip(x, 16 * x, 16)[0] == "scale"
    assert "N times too large" in diagnose_round_trip(x, 16 * x, 16)[1]
    assert diagnose_round_trip(x, x[(-np.arange(16)) % 16], 16)[0] == "sign"
    assert diagnose_round_trip(x, x + 1, 16)[0] == "unknown"


#: Broken FFT (tests/data/broken_ffts.py) -> the code the diagnosis must give for its output on
#: a random input, as the accuracy check reports it.
BROKEN_DIAGNOSES = {
    "opposite_sign_fft": "sign",
    "conjugated_fft": "sign",
    "bitreversed_fft[sizes=pow2]": "bit-reversed",
    "fftshifted_fft": "shifted",
    "float32_fft": "precision",
    "padded_fft": "truncated-size",
    "padded_truncated_fft": "truncated-size",
    "real_only_fft": "real-only",
    "ortho_scaled_fft": "scale",
    "nan_output_fft": "nonfinite",
    "float32_output_fft": "dtype",
    "short_fft": "shape",
}

#: Broken FFTs whose bug only a behaviour check can see -> (check, code).
BEHAVIOUR_DIAGNOSES = {
    "inplace_fft": ("input-intact", "input-modified"),
    "noisy_fft": ("repeatable", "nondeterministic"),
    "shared_scratch_fft": ("concurrent", "thread-unsafe"),
    "nan_to_zero_fft": ("nonfinite", "nonfinite"),
    "float32_output_fft": ("precision", "dtype"),
    "short_fft": ("shape", "shape"),
}


@pytest.mark.parametrize("name", list(BROKEN_DIAGNOSES))
@pytest.mark.parametrize("n", [60, 100])
def test_diagnosis_of_each_broken_fft(name, n):
    if name.startswith("bitreversed"):
        n = 64 if n == 60 else 128  # it handles powers of two only
    backend = load_backend(f"{BROKEN}:{name}")
    case = Case("fft", "float64", n)
    x = rand(case, seed=n)
    y = backend.plan(case).execute(x.copy())
    code, msg = diagnose(case, x, y)
    assert code == BROKEN_DIAGNOSES[name], msg
    row = check_case(backend, case, 3, ["accuracy"])[0]
    assert (row.status, row.diagnosis) == ("fail", BROKEN_DIAGNOSES[name]), row.message


@pytest.mark.parametrize("name", list(BEHAVIOUR_DIAGNOSES))
def test_behaviour_codes_of_broken_ffts(name):
    check, code = BEHAVIOUR_DIAGNOSES[name]
    row = check_case(load_backend(f"{BROKEN}:{name}"), Case("fft", "float64", 48), 3, [check])[0]
    assert (row.status, row.diagnosis) == ("fail", code), row.message


def test_diagnosis_of_broken_inverse_kinds():
    backend = load_backend(f"{BROKEN}:MissingInverseScaleBackend")
    for kind in ("ifft", "irfft"):
        row = check_case(backend, Case(kind, "float64", 40), 3, ["accuracy"])[0]
        assert row.diagnosis == "scale" and "the 1/N of the inverse transform is missing" in row.message
    row = check_case(load_backend(f"{BROKEN}:SameSignInverseBackend"), Case("fft", "float64", 40), 3,
                     ["round-trip"])[0]
    assert row.diagnosis == "sign" and "ifft is at fault" in row.message


# -- robust diagnosis: small sizes, inputs that hide a hypothesis, small scales, overflow ----------

def test_n1_computed_in_float32_is_precision_not_sign():
    """At n = 1 the DFT is the identity (X[0] = x[0], the DFT's definition): a float64 value
    rounded to float32 is a precision loss; no fitted constant may make the conjugate match."""
    case = Case("fft", "float64", 1)
    x = np.array([0.3 + 0.7j])
    y = x.astype(np.complex64).astype(np.complex128)
    code, why = diagnose(case, x, y)
    assert code == "precision", why
    assert diagnose(case, x, np.conj(x))[0] == "sign"  # the exact conjugate is still the sign bug


@pytest.mark.parametrize("kind, n", [("fft", 2), ("irfft", 2), ("rfft", 2), ("fft", 1)])
def test_small_sizes_use_fixed_factors_only(kind, n):
    """A result off by a random complex constant at n <= 2 is not explained by a fitted constant."""
    case = Case(kind, "float64", n)
    x = rand(case, 4)
    y = np_transform(case, x) * (0.79 - 0.61j if kind != "irfft" else 0.79)
    assert diagnose(case, x, y)[0] not in ("sign", "bit-reversed", "shifted", "truncated-size", "real-only")


def test_dc_only_spectrum_with_a_fixed_point_bias_is_not_truncated_size():
    """irfft of a DC-only half spectrum is a constant (the DFT's definition), which is also what
    the zero-padded size-2N candidate gives, halved: that candidate is the truth up to a scale
    on this input, no evidence for itself. The output 1.5e-5 low is a scale, with its factor."""
    case = Case("irfft", "float32", 4096)
    x = np.zeros(case.input_length, dtype=np.complex64)
    x[0] = 1000
    y = (np.fft.irfft(x.astype(np.complex128), case.n) * (1 - 1.5e-5)).astype(np.float32)
    code, why = diagnose(case, x, y)
    assert code == "scale" and "0.999985" in why, why


@pytest.mark.parametrize("dtype", ["float32", "float64"])
def test_a_small_uniform_scale_is_scale_with_its_factor(dtype):
    case = Case("fft", dtype, 64)
    x = rand(case, 5)
    y = (np_transform(case, x) * (1 + 1.5e-5)).astype(case.output_dtype)
    code, why = diagnose(case, x, y)
    assert code == "scale" and "1.000015" in why and "+1.5e-05" in why, why


@pytest.mark.parametrize("kind", ["fft", "rfft"])
def test_dc_wrap_around_of_a_large_constant_is_overflow(kind):
    """A constant input of amplitude 0.9 sums to X[0] = 0.9 N (the DFT's definition); a Q31-like
    sum wraps past the top of [-N/2, N/2) to X[0] - N, a sign flip at the rail."""
    case = Case(kind, "float32", 64)
    x = np.full(case.input_length, 0.9, dtype=case.input_dtype)
    truth = np_transform(case, x)
    for wrong_dc in (truth[0] - case.n, -truth[0]):
        y = truth.copy()
        y[0] = wrong_dc
        code, why = diagnose(case, x, y.astype(case.output_dtype))
        assert code == "overflow", why
        assert "largest magnitude (0)" in why and "sign flipped" in why


def test_overflow_is_not_claimed_for_a_negated_or_scaled_transform():
    """-X of a generic input (errors everywhere) and 2 X of a DC-only input (no sign flip) are scale."""
    case = Case("fft", "float64", 64)
    x = rand(case, 6)
    assert diagnose(case, x, -np_transform(case, x))[0] == "scale"
    dc = np.full(64, 0.5 + 0j)
    assert diagnose(case, dc, 2 * np_transform(case, dc))[0] == "scale"
    impulse = np.zeros(64, dtype=complex)
    impulse[0] = 1  # a flat spectrum: every output is of largest magnitude
    assert diagnose(case, impulse, -np_transform(case, impulse))[0] == "scale"


@pytest.mark.parametrize("declared, applied, words", [
    ("1/n", "1/sqrt(n)", "output is sqrt(N) times too large: it scales by 1/sqrt(N) where it declares 1/N"),
    ("1/sqrt(n)", "1/n", "output is sqrt(N) times too small: it scales by 1/N where it declares 1/sqrt(N)"),
    ("1", "1/n", "output is N times too small: it scales by 1/N where it declares 1"),
])
@pytest.mark.parametrize("n", (16, 100))
def test_scale_names_the_declared_factor_and_the_applied_one(declared, applied, words, n):
    # A routine applying `applied` to numpy.fft.fft's sum, with the declared scale undone
    # (divided out), as the battery hands it to the diagnosis.
    factor = {"1": 1.0, "1/n": 1.0 / n, "1/sqrt(n)": 1.0 / np.sqrt(n)}
    case = Case("fft", "float64", n)
    x = random_input(case, case_rng(3, case, "diagnosis"))
    y = np.fft.fft(x) * factor[applied] / factor[declared]
    code, message = diagnose(case, x, y, declared_scale=declared)
    assert code == "scale"
    assert message == f"{words} (forward_scale={declared})"
    # Without a declaration, the same output is named against the case's norm.
    assert "where 1 is due" in diagnose(case, x, y)[1]
