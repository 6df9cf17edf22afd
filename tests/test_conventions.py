"""Declared conventions (harness/battery/conventions.py and the battery that applies them).

The routines under test are in tests/data/convention_ffts.py, each verified here first
against an outside reference: numpy.fft (with the permutation, shift, scale or sign its
convention makes) and, for the +j sign, a direct DFT in mpmath at 30 digits. Then:

- each routine, declared (SPEC options or an adapter's ``Capabilities.conventions``),
  passes every check of the battery on a set of sizes;
- each, undeclared, gets the diagnosis code it gets today (bit-reversed, scale, sign, shifted);
- each declared wrongly (1/N declared, 1/sqrt(N) applied, and the other way round) fails
  with ``scale``, the message naming both factors;
- the packed real layouts against a worked example for N = 8 computed by hand.
"""

from __future__ import annotations

import json
import math
import subprocess
import sys
from pathlib import Path

import mpmath
import numpy as np
import pytest

from fftgauge.backends.base import Backend, Capabilities, Conventions, FunctionPlan
from fftgauge.backends.registry import load_backend
from fftgauge.harness.battery.checks import check_case
from fftgauge.harness.battery.conventions import DeclaredConvention
from fftgauge.harness.cases import Case
from fftgauge.harness.dft import bit_reversal_permutation

DATA = Path(__file__).parent / "data"
ROUTINES = str(DATA / "convention_ffts.py")
sys.path.insert(0, str(DATA))
import convention_ffts  # noqa: E402

POW2 = (1, 2, 4, 8, 16, 64, 256, 1024)
ANY = (1, 2, 3, 8, 12, 15, 64, 100, 1000, 1024)


def backend(spec: str):
    return load_backend(f"{ROUTINES}:{spec}")


def rows_of(b, kind: str, sizes, dtypes=("float32", "float64"), checks=None):
    return [r for n in sizes for dt in dtypes for r in check_case(b, Case(kind, dt, n), 7, checks)]


def problems(rows):
    """Rows that neither pass nor skip for a reason that has nothing to do with conventions."""
    return [(r.kind, r.dtype, r.n, r.check, r.status, r.message) for r in rows if r.status not in ("pass", "skip")]


def signal(n: int, seed: int = 0) -> np.ndarray:
    rng = np.random.default_rng(seed)
    return rng.standard_normal(n) + 1j * rng.standard_normal(n)


# -- the routines, against outside references ------------------------------------------------------

@pytest.mark.parametrize("n", POW2)
def test_bitreversed_dit_is_numpys_fft_in_bit_reversed_order(n):
    # Source: numpy.fft.fft; entry k of the in-place DIT without its reordering is X[bitrev(k)]
    # (Cooley & Tukey 1965; Oppenheim & Schafer, 3rd ed., Fig. 9.15, from memory).
    x = signal(n)
    want = np.fft.fft(x)[bit_reversal_permutation(n)]
    assert np.allclose(convention_ffts.bitreversed_dit(x), want, rtol=0, atol=1e-12 * max(1, n))
    if n >= 4:  # it really is not in natural order
        assert not np.allclose(convention_ffts.bitreversed_dit(x), np.fft.fft(x))


def test_bit_reversal_permutation_for_8_by_hand():
    # 3-bit reversal written out: 0=000->000, 1=001->100=4, 2=010->010, 3=011->110=6, ...
    assert bit_reversal_permutation(8).tolist() == [0, 4, 2, 6, 1, 5, 3, 7]


def test_plus_sign_fft_against_mpmath():
    # Source: the DFT's definition with exponent +1, summed directly in mpmath at 30 digits.
    x = signal(12, 3)
    with mpmath.workdps(30):
        want = [complex(mpmath.fsum(mpmath.mpc(complex(x[j])) * mpmath.expjpi(mpmath.mpf(2 * k * j) / 12)
                                    for j in range(12))) for k in range(12)]
    assert np.allclose(convention_ffts.plus_sign_fft(x), want, rtol=0, atol=1e-12)
    assert np.allclose(convention_ffts.plus_sign_ifft(convention_ffts.plus_sign_fft(x)), x, atol=1e-13)


def test_plus_sign_real_and_three_convention_routines_against_the_verified_ones():
    # plus_sign_fft is verified against mpmath above; a real input's half of it is the +1 rfft.
    x = signal(16, 5).real
    assert np.allclose(convention_ffts.plus_sign_rfft(x), convention_ffts.plus_sign_fft(x)[:9], atol=1e-12)
    assert np.allclose(convention_ffts.plus_sign_irfft(convention_ffts.plus_sign_rfft(x), 16), x, atol=1e-14)
    z = signal(16, 6)
    want = convention_ffts.plus_sign_fft(z)[bit_reversal_permutation(16)] / 16
    assert np.allclose(convention_ffts.dsp_style_fft(z), want, atol=1e-14)


def test_scaled_and_centred_routines_against_numpy():
    x = signal(10, 4)
    assert np.allclose(convention_ffts.scaled_fft(x), np.fft.fft(x) / 10, atol=1e-15)
    assert np.allclose(convention_ffts.sqrt_scaled_fft(x), np.fft.fft(x) / math.sqrt(10), atol=1e-15)
    assert np.allclose(convention_ffts.unscaled_ifft(convention_ffts.scaled_fft(x)), x, atol=1e-14)
    centred = convention_ffts.centred_fft(x)
    assert centred[5] == pytest.approx(np.sum(x))  # DC at index n // 2 (numpy.fft.fftshift)
    assert np.allclose(convention_ffts.centred_ifft(centred), x, atol=1e-14)


# -- declared: every check passes ------------------------------------------------------------------

DECLARED = [
    ("bitreversed_dit[order=bit-reversed,sizes=pow2]", ("fft",), POW2),
    ("scaled_fft[forward_scale=1/n]", ("fft",), ANY),
    ("scaled_fft+unscaled_ifft[forward_scale=1/n,inverse_scale=1]", ("fft", "ifft"), ANY),
    ("plus_sign_fft+plus_sign_ifft[sign=+1]", ("fft", "ifft"), ANY),
    ("centred_fft+centred_ifft[order=centred]", ("fft", "ifft"), ANY),
    ("CentredBackend", ("fft", "ifft"), ANY),
    ("plus_sign_rfft+plus_sign_irfft[kind=rfft,sign=+1]", ("rfft", "irfft"), ANY),
    ("dsp_style_fft[sign=+1,forward_scale=1/n,order=bit-reversed,sizes=pow2]", ("fft",), POW2),
    ("dc_nyquist_rfft+dc_nyquist_irfft[kind=rfft,packing=dc-nyquist]", ("rfft", "irfft"),
     (2, 4, 8, 12, 64, 100, 1000, 1024)),
    ("halfcomplex_rfft+halfcomplex_irfft[kind=rfft,packing=halfcomplex]", ("rfft", "irfft"), ANY),
]


@pytest.mark.parametrize("spec, kinds, sizes", DECLARED, ids=[d[0].split("[")[0] for d in DECLARED])
def test_declared_convention_passes_the_battery(spec, kinds, sizes):
    b = backend(spec)
    for kind in kinds:
        rows = rows_of(b, kind, sizes)
        assert not problems(rows), problems(rows)[:3]
        checked = [r for r in rows if r.status == "pass"]
        assert len(checked) >= 12 * len(sizes)  # nearly every check ran, at every size
        declared = DeclaredConvention(b.conventions).describe(Case(kind, "float64", 8))
        assert declared and all(f"[declared convention: {declared};" in r.message for r in checked)
        skipped = {r.message for r in rows if r.status == "skip"}
        assert all(("n = 1" in m or "n >= 2" in m or "needs" in m) for m in skipped), skipped


def test_round_trip_and_convolution_run_through_the_declared_inverse():
    # The inverse takes its spectrum in the declared convention: a centred one, a 1/N-scaled one.
    for spec in ("centred_fft+centred_ifft[order=centred]", "scaled_fft+unscaled_ifft[forward_scale=1/n,inverse_scale=1]",
                 "halfcomplex_rfft+halfcomplex_irfft[kind=rfft,packing=halfcomplex]"):
        b = backend(spec)
        kind = b.capabilities().kinds[0]
        rows = {r.check: r for r in check_case(b, Case(kind, "float64", 48), 2, ["round-trip", "convolution"])}
        assert rows["round-trip"].status == "pass" and "(x)) misses x by" in rows["round-trip"].message
        assert rows["convolution"].status == "pass" and "exact circular convolution" in rows["convolution"].message


def test_cli_check_passes_declared_conventions(tmp_path):
    out = tmp_path / "check.json"
    specs = [f"{ROUTINES}:bitreversed_dit[order=bit-reversed,sizes=pow2,label=dit]",
             f"{ROUTINES}:plus_sign_fft[sign=+1,label=plus]",
             f"{ROUTINES}:scaled_fft[forward_scale=1/n,label=scaled]",
             f"{ROUTINES}:centred_fft[order=centred,label=centred]"]
    cmd = [sys.executable, "-m", "fftgauge", "check", "--kinds", "fft", "--dtypes", "float64",
           "--sizes", "8,64,1024", "--quiet", "--json", str(out)]
    for spec in specs:
        cmd += ["--backend", spec]
    done = subprocess.run(cmd, capture_output=True, text=True, timeout=600)
    assert done.returncode == 0, done.stderr[-2000:] + done.stdout[-2000:]
    doc = json.loads(out.read_text())
    rows = doc["rows"]
    assert {r["backend"] for r in rows} == {"dit", "plus", "scaled", "centred"}
    assert not [r for r in rows if r["status"] not in ("pass", "skip")]
    recorded = {label: entry["capabilities"]["conventions"] for label, entry in doc["backends"].items()}
    assert recorded["dit"]["order"] == "bit-reversed" and recorded["plus"]["sign"] == 1
    assert recorded["scaled"]["forward_scale"] == "1/n" and recorded["centred"]["order"] == "centred"


# -- undeclared: the diagnosis as today ------------------------------------------------------------

UNDECLARED = [
    ("bitreversed_dit", "bit-reversed"),
    ("scaled_fft", "scale"),
    ("plus_sign_fft", "sign"),
    ("centred_fft", "shifted"),
]


@pytest.mark.parametrize("spec, code", UNDECLARED)
@pytest.mark.parametrize("n", (16, 256))
def test_undeclared_convention_gets_its_code(spec, code, n):
    rows = check_case(backend(spec), Case("fft", "float64", n), 3, ["accuracy", "linearity", "impulse"])
    accuracy = rows[0]
    assert accuracy.status == "fail" and accuracy.diagnosis == code, accuracy.message
    assert "declared convention" not in accuracy.message
    assert rows[1].status == "pass"  # every one of them is still linear


# -- declared wrongly: the different convention is found ---------------------------------------------

@pytest.mark.parametrize("n", (16, 100, 1024))
def test_declared_one_over_n_but_one_over_sqrt_n_is_scale_with_both_factors(n):
    rows = check_case(backend("sqrt_scaled_fft[forward_scale=1/n]"), Case("fft", "float64", n), 3)
    accuracy = {r.check: r for r in rows}["accuracy"]
    assert accuracy.status == "fail" and accuracy.diagnosis == "scale"
    assert "it scales by 1/sqrt(N) where it declares 1/N (forward_scale=1/n)" in accuracy.message
    assert "sqrt(N) times too large" in accuracy.message
    failing = {r.check for r in rows if r.status == "fail"}
    assert {"accuracy", "impulse", "parseval", "pairs"} <= failing
    assert {r.diagnosis for r in rows if r.status == "fail"} == {"scale"}


def test_declared_one_over_sqrt_n_but_one_over_n_and_a_wrong_inverse_scale():
    rows = check_case(backend("scaled_fft[forward_scale=1/sqrt(n)]"), Case("fft", "float32", 64), 3, ["accuracy"])
    assert rows[0].diagnosis == "scale"
    assert "it scales by 1/N where it declares 1/sqrt(N) (forward_scale=1/sqrt(n))" in rows[0].message
    # plus_sign_ifft applies 1/N; declared as applying none:
    b = backend("plus_sign_fft+plus_sign_ifft[sign=+1,inverse_scale=1]")
    rows = check_case(b, Case("ifft", "float64", 32), 3, ["accuracy"])
    assert rows[0].diagnosis == "scale"
    assert "it scales by 1/N where it declares 1 (inverse_scale=1)" in rows[0].message


def test_a_convention_other_than_the_declared_one_stays_visible():
    # Declared bit-reversed, actually natural: undoing the bit reversal makes it bit-reversed.
    natural = check_case(load_backend("numpy[order=bit-reversed]"), Case("fft", "float64", 64), 3, ["accuracy"])
    assert natural[0].diagnosis == "bit-reversed"
    # Declared centred, actually bit-reversed: neither, so it fails.
    rows = check_case(backend("bitreversed_dit[order=centred]"), Case("fft", "float64", 64), 3, ["accuracy"])
    assert rows[0].status == "fail"
    # Declared +1 on numpy's own fft: the opposite sign shows as sign.
    flipped = check_case(load_backend("numpy[sign=+1]"), Case("fft", "float64", 64), 3, ["accuracy"])
    assert flipped[0].diagnosis == "sign" and "[declared convention: sign=+1;" in flipped[0].message


def test_spec_overrides_the_adapters_declared_convention():
    b = backend("CentredBackend[order=natural]")
    assert b.conventions.order == "natural" and b.capabilities().conventions.order == "centred"
    rows = check_case(b, Case("fft", "float64", 64), 3, ["accuracy"])
    assert rows[0].diagnosis == "shifted"


# -- sizes a declaration cannot be undone at --------------------------------------------------------

def test_sizes_a_declared_convention_cannot_be_undone_at_are_skipped():
    rows = check_case(backend("bitreversed_dit[order=bit-reversed]"), Case("fft", "float64", 12), 3)
    assert {r.status for r in rows} == {"skip"}
    assert "order=bit-reversed needs a power-of-two size (n = 12)" in rows[0].message
    b = backend("dc_nyquist_rfft+dc_nyquist_irfft[kind=rfft,packing=dc-nyquist]")
    rows = check_case(b, Case("irfft", "float64", 15), 3)
    assert {r.status for r in rows} == {"skip"} and "needs an even size (n = 15)" in rows[0].message


def test_packed_output_of_the_wrong_length_fails_with_shape():
    # numpy's rfft (n//2 + 1 complex values) declared as halfcomplex (n reals).
    rows = {r.check: r for r in check_case(load_backend("numpy[packing=halfcomplex]"), Case("rfft", "float64", 16), 3)}
    assert rows["accuracy"].status == "fail" and rows["accuracy"].diagnosis == "shape"
    assert "(16,) is due (packing=halfcomplex: n reals)" in rows["accuracy"].message
    assert rows["shape"].status == "fail" and rows["shape"].value == 9.0 and rows["shape"].limit == 16.0


# -- the packed layouts, worked by hand for N = 8 -------------------------------------------------

# x = [1, 2, 3, 4, 0, 0, 0, 0], X[k] = sum_j x[j] exp(-2j pi k j / 8), with
# exp(-j pi/4) = (1 - j)/sqrt(2), exp(-j pi/2) = -j, exp(-3j pi/4) = -(1 + j)/sqrt(2):
#   X0 = 1 + 2 + 3 + 4 = 10
#   X1 = 1 + 2 (1 - j)/r2 - 3j - 4 (1 + j)/r2 = (1 - sqrt(2)) - (3 + 3 sqrt(2)) j
#   X2 = 1 - 2j - 3 + 4j = -2 + 2j
#   X3 = 1 - 2 (1 + j)/r2 + 3j + 4 (1 - j)/r2 = (1 + sqrt(2)) + (3 - 3 sqrt(2)) j
#   X4 = 1 - 2 + 3 - 4 = -2
R2 = math.sqrt(2.0)
HAND_X = [10, (1 - R2) - (3 + 3 * R2) * 1j, -2 + 2j, (1 + R2) + (3 - 3 * R2) * 1j, -2]
HAND_PACKED = {
    # Re X0, Re X4, Re X1, Im X1, Re X2, Im X2, Re X3, Im X3
    "dc-nyquist": [10, -2, 1 - R2, -(3 + 3 * R2), -2, 2, 1 + R2, 3 - 3 * R2],
    # Re X0, Re X1, Re X2, Re X3, Re X4, Im X3, Im X2, Im X1
    "halfcomplex": [10, 1 - R2, -2, 1 + R2, -2, 3 - 3 * R2, 2, -(3 + 3 * R2)],
}
X8 = np.array([1, 2, 3, 4, 0, 0, 0, 0], dtype=float)


def test_hand_worked_spectrum_matches_numpy():
    assert np.allclose(np.fft.rfft(X8), HAND_X, rtol=0, atol=1e-14)


@pytest.mark.parametrize("packing, routine", [("dc-nyquist", convention_ffts.dc_nyquist_rfft),
                                              ("halfcomplex", convention_ffts.halfcomplex_rfft)])
def test_packed_layout_against_the_hand_worked_example(packing, routine):
    assert np.allclose(routine(X8), HAND_PACKED[packing], rtol=0, atol=1e-14)
    conv = DeclaredConvention(Conventions(packing=packing))
    rfft = Case("rfft", "float64", 8)
    unpacked = conv.from_backend(np.array(HAND_PACKED[packing]), rfft)
    assert unpacked.shape == (5,) and np.allclose(unpacked, HAND_X, rtol=0, atol=1e-14)
    # The irfft input goes to the backend in the same layout; the backend's irfft then gives x back.
    irfft = Case("irfft", "float64", 8)
    packed_in = conv.to_backend(np.fft.rfft(X8), irfft)
    assert np.allclose(packed_in, HAND_PACKED[packing], rtol=0, atol=1e-14)
    inverse = convention_ffts.dc_nyquist_irfft if packing == "dc-nyquist" else convention_ffts.halfcomplex_irfft
    assert np.allclose(inverse(packed_in, 8), X8, atol=1e-14)
    assert conv.output_length(rfft) == 8 and conv.output_dtype(Case("rfft", "float32", 8)) == np.float32


def test_which_fields_apply_to_which_kind():
    conv = DeclaredConvention(Conventions(sign=1, forward_scale="1/n", inverse_scale="1", order="centred",
                                          packing="halfcomplex"))
    assert conv.describe(Case("fft", "float64", 8)) == "sign=+1, forward_scale=1/n, order=centred"
    assert conv.describe(Case("ifft", "float64", 8)) == "sign=+1, inverse_scale=1, order=centred"
    assert conv.describe(Case("rfft", "float64", 8)) == "sign=+1, forward_scale=1/n, packing=halfcomplex"
    assert conv.describe(Case("irfft", "float64", 8)) == "sign=+1, inverse_scale=1, packing=halfcomplex"
    numpys = DeclaredConvention(Conventions(sign=-1, order="natural", packing="complex"))
    assert all(numpys.describe(Case(k, "float64", 8)) == "" for k in ("fft", "ifft", "rfft", "irfft"))


# -- an adapter class declares the same things in its capabilities ------------------------------------

class PlusSignAdapter(Backend):
    """numpy's fft with the +j sign and 1/N, declared in Capabilities.conventions."""

    name = "plus-sign-scaled"

    def capabilities(self) -> Capabilities:
        return Capabilities(kinds=("fft",), norms=("backward", "ortho", "forward"),
                            conventions=Conventions(sign=1, forward_scale="1/n"))

    def plan(self, case: Case) -> FunctionPlan:
        return FunctionPlan(case, lambda x: np.fft.ifft(x).astype(np.result_type(x.dtype, np.complex64)))


@pytest.mark.parametrize("norm", ("backward", "ortho", "forward"))
def test_adapter_declares_its_conventions_in_its_capabilities(norm):
    # numpy.fft.ifft is (1/N) sum exp(+2j pi k j / N): the +1 sign and 1/N, whatever norm is asked.
    rows = [r for n in (1, 8, 30, 256) for r in check_case(PlusSignAdapter(), Case("fft", "float64", n, norm), 5)]
    assert not problems(rows), problems(rows)[:3]
    assert all("sign=+1, forward_scale=1/n" in r.message for r in rows if r.status == "pass")


# -- declared conventions outside the battery: timing and the budget probe --------------------

PACKED = ["halfcomplex_rfft+halfcomplex_irfft[kind=rfft,packing=halfcomplex]",
          "dc_nyquist_rfft+dc_nyquist_irfft[kind=rfft,packing=dc-nyquist]"]


@pytest.mark.parametrize("spec", PACKED)
def test_time_gives_a_packed_irfft_its_half_spectrum_in_the_declared_packing(spec, tmp_path):
    """``fftgauge time`` of a packed real pair times its irfft (given numpy's complex half
    spectrum the routine raises: a broadcast error, so every irfft row would be an error)."""
    out = tmp_path / "t.json"
    done = subprocess.run([sys.executable, "-m", "fftgauge", "time", "--backend", f"{ROUTINES}:{spec}",
                           "--sizes", "8,16", "--dtypes", "float64", "--samples", "5", "--json", str(out),
                           "--quiet"], capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr
    rows = json.loads(out.read_text())["rows"]
    assert sorted((r["kind"], r["n"], r["status"]) for r in rows) == [
        (k, n, "ok") for k in ("irfft", "rfft") for n in (8, 16)], rows


def test_the_timers_plan_prepares_the_declared_convention_of_numpys_input():
    """The timer's plan turns the numpy-convention input into the declared one before any
    timed call: a bit-reversed ifft spectrum is x[bitrev(k)] (dft.bit_reversal_permutation),
    a halfcomplex irfft input n reals (Re X0..Re X[n/2], Im X[n/2-1]..Im X1); a backend that
    declares nothing for the kind keeps its own plan."""
    from fftgauge.harness.battery.inputs import case_rng, random_input
    from fftgauge.harness.timing.clock import DEFAULT_CLOCK
    from fftgauge.harness.timing.case_job import planned

    b = backend("bitreversed_dit+unscaled_ifft[order=bit-reversed,inverse_scale=1/n,sizes=pow2]")
    case = Case("ifft", "float64", 16)
    numpys = random_input(case, case_rng(7, case, "time"))
    plan, _ = planned(b, case, DEFAULT_CLOCK)
    np.testing.assert_array_equal(plan.prepare(numpys), numpys[bit_reversal_permutation(16)])
    packed = backend(PACKED[0])
    case = Case("irfft", "float64", 16)
    half = random_input(case, case_rng(7, case, "time"))
    plan, _ = planned(packed, case, DEFAULT_CLOCK)
    x_in = plan.prepare(half)
    assert x_in.dtype == np.float64 and x_in.shape == (16,)
    np.testing.assert_array_equal(x_in, np.concatenate([half.real, half.imag[1:8][::-1]]))
    np.testing.assert_allclose(plan.execute(x_in), np.fft.irfft(half, 16), atol=1e-15)  # reference: numpy.fft
    own = backend("plus_sign_fft[sign=+1]").plan(Case("fft", "float64", 16))
    plan, _ = planned(backend("plus_sign_fft[sign=+1]"), Case("fft", "float64", 16), DEFAULT_CLOCK)
    assert type(plan) is type(own)


@pytest.mark.parametrize("spec", PACKED)
def test_the_budget_probe_times_a_packed_irfft(spec):
    """measure_call_seconds gives the packed irfft its declared input, so the probe has a time
    (None would mean the call raised)."""
    from fftgauge.harness.battery.budget import measure_call_seconds

    probes = measure_call_seconds(backend(spec), [("irfft", "float64", 16, "backward")], seed=3)
    assert len(probes) == 1 and probes[0][0] == 16 and probes[0][1] is not None


def test_time_skips_a_size_its_declared_order_cannot_be_given_at():
    """order=bit-reversed needs a power of two (dft.bit_reversal_permutation): ``time`` at
    n = 12 is a skip row saying so, as ``check`` gives, not an error from the conversion."""
    from fftgauge.harness.timing.runner import TimingRequest, run_timing

    spec = f"{ROUTINES}:bitreversed_dit+unscaled_ifft[order=bit-reversed,inverse_scale=1/n]"
    rows = run_timing(TimingRequest(specs=(spec,), kinds=("fft", "ifft"), dtypes=("float64",), sizes=(8, 12),
                                    samples=5, measure_memory=False, rounds=1))["rows"]
    assert sorted((r["kind"], r["n"], r["status"]) for r in rows) == [
        ("fft", 8, "ok"), ("fft", 12, "skip"), ("ifft", 8, "ok"), ("ifft", 12, "skip")]
    assert all("order=bit-reversed needs a power-of-two size (n = 12)" in r["message"] for r in rows if r["n"] == 12)
