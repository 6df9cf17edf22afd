"""Fixed-point inverse and real transforms (ifft, rfft, irfft): the reference against exact
rationals, the round trip and its limit, broken twins caught and diagnosed.

Sources, beside each test: an exact rational implementation written for the tests
(tests/data/fixed_point_ffts.py: Fractions, mpmath twiddles, its own Hermitian extension) for
the reference's arithmetic bit for bit; numpy.fft's ifft/irfft (the 1/N convention) and scipy
on long double (harness reference) for what the declared shift means.
"""

from __future__ import annotations

import functools
import sys
from pathlib import Path

import numpy as np
import pytest

from fftgauge.backends.fixed_radix2 import FixedRadix2Backend
from fftgauge.harness.cases import Case
from fftgauge.harness.fixed.checks import FIXED_CHECKS, fixed_check_case
from fftgauge.harness.fixed.formats import FORMATS, quantise
from fftgauge.harness.fixed.measure import exact_output
from fftgauge.harness.fixed.metrics import measure
from fftgauge.harness.fixed.radix2 import SCALINGS, FixedRadix2
from fftgauge.harness.fixed.signals import test_signal as signal_of

sys.path.insert(0, str(Path(__file__).parent / "data"))
import fixed_point_ffts as twins  # noqa: E402

Q15, Q31 = FORMATS["q15"], FORMATS["q31"]


def rows_of(backend, kind, n=16, dtype="q15"):
    return {r.check: r for r in fixed_check_case(backend, Case(kind, dtype, n), 1234)}


@functools.lru_cache(maxsize=None)
def twin_rows(cls, kind, n=16):
    """The rows of a twin of tests/data/fixed_point_ffts.py (each computed once: the scalar
    routines run on exact rationals and are slow)."""
    return rows_of(cls(), kind, n)


# -- the reference against exact rationals ---------------------------------------------------

@pytest.mark.parametrize("fmt", [Q15, Q31], ids=["q15", "q31"])
@pytest.mark.parametrize("scaling", SCALINGS)
def test_inverse_and_real_kinds_match_exact_rationals(fmt, scaling):
    """Bit for bit against tests/data/fixed_point_ffts.py (exact rationals, mpmath twiddles,
    its own Hermitian extension) at N = 1..16, every rounding, saturation and wrap-around,
    and 8-bit twiddles, on full-scale random inputs (the unscaled transforms overflow)."""
    rng = np.random.default_rng(21)
    for n in (1, 2, 4, 8, 16):
        z = rng.uniform(-1, 1, n) + 1j * rng.uniform(-1, 1, n)
        x = quantise(z / max(1.0, np.max(np.abs(z))) * 0.999, fmt)
        real = x[:, 0].copy()
        half = x[: n // 2 + 1].copy()
        for rounding in ("truncate", "round-half-up", "convergent"):
            for overflow, tb in (("saturate", None), ("wrap", None), ("saturate", 8)):
                ref = FixedRadix2(fmt, scaling, rounding, overflow, tb)
                args = (fmt.bits, scaling, rounding, overflow, tb)
                got = ref.run("ifft", x)
                want, exp = twins.scalar_fft([(int(a), int(b)) for a, b in x], *args, inverse=True)
                assert got.pairs.tolist() == [list(p) for p in want] and got.exponent == exp, ("ifft", n, rounding)
                got = ref.run("rfft", real)
                want, exp = twins.scalar_rfft([int(v) for v in real], *args)
                assert got.pairs.tolist() == [list(p) for p in want] and got.exponent == exp, ("rfft", n, rounding)
                got = ref.run("irfft", half, n)
                want, exp = twins.scalar_irfft([(int(a), int(b)) for a, b in half], n, *args)
                assert got.pairs[:, 0].tolist() == want and not got.pairs[:, 1].any(), ("irfft", n, rounding)
                assert got.exponent == exp


@pytest.mark.parametrize("kind", ["ifft", "rfft", "irfft"])
def test_declared_shift_of_the_inverse_and_real_kinds_is_numpys_convention(kind):
    """With 1/2 per stage the declared shift log2 N makes the ifft/irfft output numpy's
    ifft/irfft of the integers (1/N) and the rfft output numpy's rfft over N; checked
    against numpy.fft at N = 256 within the worst-case bound (q15, noise at -6 dBFS)."""
    from fftgauge.harness.fixed.bounds import error_bound_lsb

    n = 256
    x = signal_of("noise", n, -6.0, Q15, 3, kind)
    out = FixedRadix2(Q15, "stage").run(kind, x, n)
    assert out.exponent == 8
    got = out.pairs[:, 0] + 1j * out.pairs[:, 1].astype(float)
    if kind == "ifft":
        want = np.fft.ifft(x[:, 0] + 1j * x[:, 1].astype(float))
    elif kind == "rfft":
        want = np.fft.rfft(x.astype(float)) / n
    else:
        want = np.fft.irfft(x[:, 0] + 1j * x[:, 1].astype(float), n)
    assert np.max(np.abs(got - want)) <= error_bound_lsb("stage", n, Q15)
    assert np.max(np.abs(want)) > 100  # a real signal, not rounding noise


# -- the checks on correct transforms -------------------------------------------------------

@pytest.mark.parametrize("kind", ["ifft", "rfft", "irfft"])
@pytest.mark.parametrize("scaling", SCALINGS)
def test_reference_backend_passes_every_check_in_every_kind(kind, scaling):
    """The built-in reference judged against itself passes every check (round-trip included,
    or skipped without scaling where no input level leaves 4 LSB), q15 and q31, N = 64."""
    for dtype in ("q15", "q31"):
        rows = rows_of(FixedRadix2Backend(scaling=scaling), kind, 64, dtype)
        assert list(rows) == list(FIXED_CHECKS)
        bad = {c: r.message for c, r in rows.items() if r.status != "pass" and
               not (c == "round-trip" and r.status == "skip" and scaling == "none")}
        assert not bad, (dtype, bad)
        if scaling != "none" or dtype == "q31":
            assert rows["round-trip"].status == "pass"


def round_trip(backend, kind, n, dtype="q15"):
    """Return the round-trip row of ``kind`` alone (harness/fixed/structure.py)."""
    from fftgauge.harness.fixed.structure import PARTNER, Runner, round_trip_row

    plan = backend.plan(Case(kind, dtype, n))
    runner = Runner(plan.execute, FORMATS[dtype], n, backend.capabilities().fixed, kind)
    row = round_trip_row(lambda check, status, **f: dict(status=status, **f), runner,
                         backend.capabilities().fixed.scaling, 1234,
                         lambda: backend.plan(Case(PARTNER[kind], dtype, n)))
    return row


def test_round_trip_limit_holds_for_the_reference_at_many_sizes():
    """The derived limit (module docstring of harness/fixed/structure.py) is never exceeded by
    the reference, every kind then its partner, N = 2..4096, every scaling with headroom, q15
    and q31; the measured error is not zero (the check measures something)."""
    for n in (2, 16, 256, 4096):
        for scaling in ("stage", "input", "bfp"):
            for kind in ("fft", "ifft", "rfft", "irfft"):
                for dtype in ("q15", "q31"):
                    row = round_trip(FixedRadix2Backend(scaling=scaling), kind, n, dtype)
                    assert row["status"] == "pass" and row["value"] <= row["limit"], (n, scaling, kind, row)
    assert round_trip(FixedRadix2Backend(scaling="stage"), "fft", 256)["value"] > 0


def test_correct_scalar_routine_passes_in_every_kind():
    """An independent scalar Q15 routine (exact rationals) passes every check of every kind."""
    for kind in ("fft", "ifft", "rfft", "irfft"):
        rows = rows_of(twins.AllKindsQ15(), kind)
        assert {r.status for r in rows.values()} == {"pass"}, {c: r.message for c, r in rows.items()
                                                               if r.status != "pass"}


def test_round_trip_skips_without_a_partner_kind():
    """A backend that claims fft only: round-trip is a skip naming the missing ifft."""
    row = rows_of(twins.ScalarQ15(), "fft")["round-trip"]
    assert row.status == "skip" and "ifft" in row.message


# -- broken inverse and real transforms -------------------------------------------------------

@pytest.mark.parametrize("cls,kind,check,code", [
    (twins.InverseWrongShift, "ifft", "sqnr", "scaling-shift"),
    (twins.InverseWrongShift, "ifft", "impulse", "scaling-shift"),
    (twins.InverseWrongShift, "irfft", "sqnr", "scaling-shift"),
    (twins.InverseWrongShift, "fft", "round-trip", "scaling-shift"),
    (twins.InverseWrongShift, "rfft", "round-trip", "scaling-shift"),
    (twins.NoConjugation, "ifft", "sqnr", "sign"),
    (twins.NoConjugation, "ifft", "time-shift", "sign"),
    (twins.NoConjugation, "irfft", "sqnr", "sign"),
    (twins.NoConjugation, "fft", "round-trip", "sign"),
    (twins.NoConjugation, "irfft", "round-trip", "sign"),
    (twins.RealTruncating, "rfft", "sqnr", "rounding"),
    (twins.RealTruncating, "ifft", "sqnr", "rounding"),
    (twins.RealNoSaturation, "rfft", "overflow", "overflow"),
    (twins.RealNoSaturation, "irfft", "overflow", "overflow"),
])
def test_broken_inverse_and_real_twins_are_caught_and_diagnosed(cls, kind, check, code):
    """Each twin of tests/data/fixed_point_ffts.py fails the check its bug breaks, with the code."""
    row = twin_rows(cls, kind)[check]
    assert (row.status, row.diagnosis) == ("fail", code), row.message


def test_forward_kinds_of_the_broken_inverses_still_pass_sqnr():
    """The inverse-only bugs leave the forward kinds' own checks alone (only round-trip fails)."""
    for cls in (twins.InverseWrongShift, twins.NoConjugation):
        for kind in ("fft", "rfft"):
            rows = twin_rows(cls, kind)
            assert {c for c, r in rows.items() if r.status != "pass"} == {"round-trip"}, (cls.name, kind)


def test_real_layouts_and_shapes():
    """rfft takes n integers and returns n/2 + 1 pairs; irfft returns n integers; the metrics
    of an irfft output count its (zero) imaginary parts as exact."""
    x = signal_of("noise", 16, -6.0, Q15, 1, "rfft")
    assert x.shape == (16,) and x.dtype == np.int16
    y = FixedRadix2Backend().plan(Case("rfft", "q15", 16)).execute(x)
    assert y.shape == (9, 2)
    back = FixedRadix2Backend().plan(Case("irfft", "q15", 16)).execute(y)
    assert back.shape == (16,) and back.dtype == np.int16
    half = signal_of("noise", 16, -6.0, Q15, 1, "irfft")
    assert half.shape == (9, 2) and half[0, 1] == 0 and half[8, 1] == 0
    r = FixedRadix2(Q15).run("irfft", half, 16)
    assert measure(r.pairs, exact_output(half, r.exponent, "irfft", 16), Q15).max_error_lsb < 4
