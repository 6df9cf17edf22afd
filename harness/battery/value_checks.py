"""The value checks that compare transforms with each other or with the ground truth:
``accuracy``, Ergün's three (``linearity``, ``impulse``, ``time-shift``), ``parseval``,
``round-trip``, ``symmetry`` and ``modulation``. Each is a function of a
:class:`~fftgauge.harness.battery.context.CheckContext` returning rows.

How the tolerances are derived
------------------------------
Every computed transform is trusted to be within ``limit = accuracy_limit(case)`` of the
exact one, relative to its own 2-norm (:mod:`fftgauge.harness.battery.bounds`). A check that compares
combinations of several computed transforms measures the difference *relative to the sum
of the norms of the computed transforms it is built from*, each weighted by its coefficient
(``S = norm F(z) + |a| norm F(x) + |b| norm F(y)`` for linearity). Errors add: the
difference is then at most ``limit`` in these units, plus the rounding of forming the
combinations and of rounding new inputs to the case's precision, which
:data:`ROUNDING_UNITS` unit roundoffs cover. Where a half spectrum is extended to a full one
(``rfft``, ``irfft``) its error can grow by sqrt(2) (the extended error has at most twice the
energy), so those terms are weighted by sqrt(2). Each check's docstring states its own sum.

Sources: the DFT properties are Oppenheim & Schafer, Discrete-Time Signal Processing, 3rd
ed., Table 8.2 (from memory; the tests verify each numerically); linearity, impulse
response and time shift together are Ergün's test (Ergün, "Testing multivariate linear
functions: overcoming the generator bottleneck", Proc. 27th ACM STOC (1995) 407-416).
"""

from __future__ import annotations

from typing import Any

import numpy as np

from fftgauge.harness.battery import bounds
from fftgauge.harness.battery.context import (
    SQRT2, CheckContext, OutputProblem, fmt_eps, norm2, phases, ratio, relative,
)
from fftgauge.harness.battery.diagnosis import diagnose_round_trip
from fftgauge.harness.cases import Case
from fftgauge.harness.dft import hermitian_full
from fftgauge.harness.rows import CheckRow


# -- accuracy ------------------------------------------------------------------------------------

def check_accuracy(ctx: CheckContext) -> list[CheckRow]:
    """Relative rms (= relative 2-norm) error against the ground truth, Gaussian and uniform inputs.

    Fails when the worse of the two exceeds :func:`fftgauge.harness.battery.bounds.accuracy_limit`; the
    message also gives the largest single error relative to the rms of the exact output.
    """
    worst = None
    for dist in ("gaussian", "uniform"):
        x = ctx.random_input(f"accuracy-{dist}", dist)
        raw = ctx.run(x)
        try:
            ctx.output(raw)
        except OutputProblem as problem:
            code, why = ctx.diagnose(x, raw)
            return [ctx.row("accuracy", "fail", diagnosis=code, message=f"{problem.message}; {why}")]
        ref = ctx.reference_fn(x, ctx.case)
        rel2, rel_max = accuracy_measures(ref, raw)
        if worst is None or not rel2 <= worst[0]:
            worst = (rel2, rel_max, dist, x, raw, ref.method)
    return accuracy_rows(ctx, worst)


def accuracy_measures(ref: Any, raw: np.ndarray) -> tuple[float, float]:
    """Return ``(relative 2-norm error, largest error relative to the rms exact output)`` of the
    output ``raw`` against the reference ``ref`` (a :class:`~fftgauge.harness.battery.reference.Reference`)."""
    err = ref.error(raw)
    ref_norm = norm2(ref.hi)
    rel2 = ratio(norm2(err), ref_norm)
    rms = ref_norm / np.sqrt(max(1, err.size))
    rel_max = ratio(float(np.max(np.abs(err))) if err.size else 0.0, rms)
    return rel2, rel_max


def accuracy_rows(ctx: Any, worst: tuple) -> list[CheckRow]:
    """Return the ``accuracy`` row of a context (1-D or shaped) from the worse input's
    ``(rel2, rel_max, distribution, x, output, reference method)``."""
    rel2, rel_max, dist, x, raw, method = worst
    dtype = ctx.case.dtype
    msg = (f"relative rms error {fmt_eps(rel2, dtype)} (max {fmt_eps(rel_max, dtype)} of the rms output), "
           f"worst on the {dist} input")
    return [ctx.verdict("accuracy", rel2, ctx.limit, msg, x, raw, reference=method)]


# -- Ergün's three -----------------------------------------------------------------------------

def check_linearity(ctx: CheckContext) -> list[CheckRow]:
    """F(a x + b y) against a F(x) + b F(y) for random inputs and random coefficients.

    Complex coefficients for the complex kinds, real ones for rfft and irfft (whose inputs
    must stay real or Hermitian). Measured relative to
    S = norm F(ax+by) + |a| norm F(x) + |b| norm F(y): at most ``limit`` plus rounding.
    """
    x = ctx.random_input("linearity-x")
    y = ctx.random_input("linearity-y")
    rng = ctx.rng("linearity-coefficients")
    if ctx.case.is_real:
        a, b = rng.standard_normal(2)
    else:
        a, b = rng.standard_normal(2) + 1j * rng.standard_normal(2)
    w = ctx.work_dtype
    z = ctx.as_input(a * x.astype(w) + b * y.astype(w))
    raw = ctx.run(x)
    fx, fy, fz = ctx.output(raw), ctx.transform(y), ctx.transform(z)
    rhs = a * fx + b * fy
    s = norm2(fz) + abs(a) * norm2(fx) + abs(b) * norm2(fy)
    value = relative(fz - rhs, s)
    tol = ctx.limit + ctx.rounding
    msg = (f"F(a x + b y) - (a F(x) + b F(y)) is {fmt_eps(value, ctx.case.dtype)} of the transforms' norms "
           f"(a = {a:.3g}, b = {b:.3g})")
    return [ctx.verdict("linearity", value, tol, msg, x, raw)]


def impulse_response(case: Case, m: int, work_dtype: np.dtype, scale: Any) -> np.ndarray:
    """Return the exact output for a unit impulse at input position ``m`` (closed form).

    fft: exp(-2j pi k m / N); ifft: exp(+2j pi k m / N); rfft: the first N//2+1 of fft's;
    irfft (impulse at frequency m of the half spectrum): 1 for m = 0, (-1)^j for m = N/2,
    else 2 cos(2 pi m j / N); each times the case's normalisation factor.
    Source: Oppenheim & Schafer, 3rd ed., ch. 8 (from memory; verified in the tests).
    """
    n = case.n
    k = np.arange(case.output_length, dtype=np.int64)
    if case.kind == "irfft":
        ph = phases(k * m, n, work_dtype)
        values = ph.real * (1 if m == 0 or 2 * m == n else 2)
        return (values * scale).astype(work_dtype)
    sign = 1 if case.is_inverse else -1
    return (phases(sign * k * m, n, work_dtype) * scale).astype(work_dtype)


def check_impulse(ctx: CheckContext) -> list[CheckRow]:
    """F(delta_m) against the closed form, for up to three random positions m.

    One computed transform against an exact closed form (evaluated to the work precision's
    last bit): at most ``limit`` plus rounding, relative to the closed form's norm.
    """
    case = ctx.case
    rng = ctx.rng("impulse")
    count = min(3, case.input_length)
    positions = [int(m) for m in rng.choice(case.input_length, size=count, replace=False)]
    tol = ctx.limit + ctx.rounding
    worst = (-1.0, None, None, None)
    for m in positions:
        x = np.zeros(case.input_length, dtype=case.input_dtype)
        x[m] = 1
        raw = ctx.run(x)
        y = ctx.output(raw)
        expected = impulse_response(case, m, ctx.work_dtype, ctx.scale)
        value = relative(y - expected, norm2(expected))
        if not value <= worst[0]:
            worst = (value, m, x, raw)
    value, m, x, raw = worst
    msg = (f"impulse responses at m = {', '.join(map(str, positions))}: worst (m = {m}) off by "
           f"{fmt_eps(value, case.dtype)}")
    return [ctx.verdict("impulse", value, tol, msg, x, raw)]


def check_time_shift(ctx: CheckContext) -> list[CheckRow]:
    """F(x[n - m]) against W^(k m) F(x) (fft, rfft; the conjugate phase for ifft) for a random m.

    irfft, whose input is a spectrum, is checked the other way round: a phase ramp on the
    half spectrum, X[k] exp(-2j pi k m / N), must roll the output by m. Relative to
    S = norm of both computed transforms: at most ``limit`` plus rounding.
    """
    case, n = ctx.case, ctx.case.n
    if n < 2:
        return [ctx.row("time-shift", "skip", message="n = 1 has no non-trivial shift")]
    m = int(ctx.rng("time-shift").integers(1, n))
    x = ctx.random_input("time-shift")
    raw = ctx.run(x)
    fx = ctx.output(raw)
    k = np.arange(case.output_length, dtype=np.int64)
    if case.kind == "irfft":
        ramp = phases(-(np.arange(case.input_length, dtype=np.int64) * m), n, ctx.work_dtype)
        shifted = ctx.as_input(x.astype(ctx.work_dtype) * ramp)
        lhs = ctx.transform(shifted)
        rhs = np.roll(fx, m)
        what = f"a phase ramp exp(-2j pi k {m} / N) on the spectrum vs the output rolled by {m}"
    else:
        sign = 1 if case.is_inverse else -1
        lhs = ctx.transform(np.roll(x, m))
        rhs = phases(sign * k * m, n, ctx.work_dtype) * fx
        what = f"x rolled by {m} vs the output times W^(k {m})"
    value = relative(lhs - rhs, norm2(lhs) + norm2(fx))
    msg = f"{what}: off by {fmt_eps(value, case.dtype)}"
    return [ctx.verdict("time-shift", value, ctx.limit + ctx.rounding, msg, x, raw)]


# -- other properties of the DFT -------------------------------------------------------------------

def _energy(v: np.ndarray) -> np.longdouble:
    """Return sum |v|^2 in long double."""
    w = v.astype(np.clongdouble)
    return np.sum(w.real**2 + w.imag**2)


def _half_energy(half: np.ndarray, n: int) -> np.longdouble:
    """Return the energy (in long double) of the Hermitian spectrum a half spectrum stands for."""
    w = half.astype(np.clongdouble)
    e = w.real**2 + w.imag**2
    total = e[0] + 2 * np.sum(e[1:(n + 1) // 2])
    if n % 2 == 0 and n > 1:
        total = total + e[n // 2]
    return total


def check_parseval(ctx: CheckContext) -> list[CheckRow]:
    """Energy: sum |F(x)|^2 = c^2 N sum |x|^2, c the normalisation factor (Parseval).

    Source: Oppenheim & Schafer, 3rd ed., Table 8.2 (from memory; verified in the tests).
    An output error e with norm(e) <= limit norm(X) changes the energy by at most
    (2 limit + limit^2) of it; for rfft the half spectrum's error counts up to sqrt(2) times
    in the full spectrum's energy.
    """
    case, n = ctx.case, ctx.case.n
    x = ctx.random_input("parseval")
    raw = ctx.run(x)
    y = ctx.output(raw)
    e_in = _half_energy(x, n) if case.kind == "irfft" else _energy(x)
    e_out = _half_energy(y, n) if case.kind == "rfft" else _energy(y)
    return parseval_rows(ctx, x, raw, e_in, e_out, np.longdouble(ctx.scale), n, case.kind == "rfft")


def parseval_rows(ctx: Any, x: np.ndarray, raw: np.ndarray, e_in: Any, e_out: Any, c: Any, points: int,
                  half_output: bool) -> list[CheckRow]:
    """Return the ``parseval`` row of a context (1-D or shaped): the energies ``e_in`` of the
    input and ``e_out`` of the output (long double) against ``c^2 points e_in``; the tolerance
    2 g limit + (g limit)^2 + rounding, g = sqrt(2) when the output is a half spectrum."""
    expected = c * c * points * e_in
    value = float(abs(e_out / expected - 1)) if expected else (0.0 if e_out == 0 else float("inf"))
    g = SQRT2 if half_output else 1.0
    tol = 2 * g * ctx.limit + (g * ctx.limit) ** 2 + ctx.rounding
    msg = f"output energy / (c^2 N input energy) = 1 {'+' if e_out >= expected else '-'} {value:.3g}"
    return [ctx.verdict("parseval", value, tol, msg, x, raw)]


def check_round_trip(ctx: CheckContext) -> list[CheckRow]:
    """The inverse of the forward gives back the input: ifft(fft(x)), fft(ifft(x)),
    irfft(rfft(x)), rfft(irfft(X)), the companion planned with the same backend.

    Skipped when the backend does not claim the companion kind. Relative to norm(x): the
    first transform's error carried through the (scaled unitary) second, at most ``limit``
    (sqrt(2) limit for a half spectrum), plus the second's own ``limit``.
    """
    plan, comp, reason = ctx.companion()
    if plan is None:
        return [ctx.row("round-trip", "skip", message=f"needs {comp.kind}: {reason}")]
    case = ctx.case
    x = ctx.random_input("round-trip")
    raw = ctx.run(x)
    y = ctx.output(raw)
    back = ctx.transform(ctx.as_input(y, comp), plan, comp)
    target = x.astype(ctx.work_dtype)
    value = relative(back - target, norm2(target))
    g = SQRT2 if case.is_real else 1.0
    tol = g * ctx.limit + bounds.accuracy_limit(comp) + ctx.rounding
    msg = f"{comp.kind}({case.kind}(x)) misses x by {fmt_eps(value, case.dtype)}"
    if np.isfinite(value) and value <= tol:
        return [ctx.row("round-trip", "pass", value, tol, message=msg)]
    code, why = companion_fault(ctx, comp, target, back)
    return [ctx.row("round-trip", "fail", value, tol, diagnosis=code, message=f"{msg}; {why}")]


def companion_fault(ctx: CheckContext, comp: Case, target: np.ndarray, back: np.ndarray,
                     subject: str = "the round trip gives the input") -> tuple[str, str]:
    """Return the diagnosis of a failed trip through the companion transform: the case's own
    transform when it is wrong, else what the trip did to the signal (the companion's fault)."""
    found = ctx.random_diagnosis()
    if found is not None:
        return found
    code, why = diagnose_round_trip(target, back, ctx.case.n, reversed_ok=ctx.case.kind != "irfft", subject=subject)
    return code, f"{ctx.case.kind} is accurate, so {comp.kind} is at fault: {why}"


def _real_signals(ctx: CheckContext) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Return a real, a real even and a real odd signal of length n (float64)."""
    n = ctx.case.n
    v = ctx.rng("symmetry").standard_normal(n)
    rev = v[(-np.arange(n)) % n]
    return v, (v + rev) / 2, (v - rev) / 2


def check_symmetry(ctx: CheckContext) -> list[CheckRow]:
    """Symmetries of the DFT of real signals (Oppenheim & Schafer, 3rd ed., Table 8.2, from memory).

    fft/ifft: a real input gives a Hermitian output (X[N-k] = conj X[k]); a real even input
    a real output; a real odd input an imaginary one. rfft: the DC (and even-N Nyquist)
    outputs of a real input are real, and the even/odd rules. irfft: a real half spectrum
    gives an even output, an imaginary one (zero DC and Nyquist) an odd output. The
    Hermitian and even/odd-output parts compare the output with itself, so S = 2 norm(X);
    the real/imaginary parts compare it with an exact zero, S = norm(X).
    """
    case, n = ctx.case, ctx.case.n
    real, even, odd = _real_signals(ctx)
    idx = (-np.arange(n)) % n
    parts: list[tuple[str, float, np.ndarray, np.ndarray]] = []
    if case.kind == "irfft":
        half = n // 2 + 1
        x_even = ctx.as_input(even[:half].astype(np.complex128))
        spec = 1j * real[:half]
        spec[0] = 0
        if n % 2 == 0:
            spec[n // 2] = 0
        x_odd = ctx.as_input(spec)
        raw = ctx.run(x_even)
        out = ctx.output(raw)
        parts.append(("real spectrum -> even output", relative(out[idx] - out, 2 * norm2(out)), x_even, raw))
        if n >= 3:
            raw = ctx.run(x_odd)
            out = ctx.output(raw)
            parts.append(("imaginary spectrum -> odd output", relative(out[idx] + out, 2 * norm2(out)), x_odd,
                          raw))
    else:
        x_real = ctx.as_input(real)
        raw = ctx.run(x_real)
        out = ctx.output(raw)
        if case.kind == "rfft":
            ends = [out[0].imag] + ([out[n // 2].imag] if n % 2 == 0 else [])
            parts.append(("real input -> real DC/Nyquist", ratio(norm2(np.array(ends)), norm2(out)), x_real, raw))
        else:
            parts.append(("real input -> Hermitian output", relative(out[idx] - np.conj(out), 2 * norm2(out)),
                          x_real, raw))
        x_even = ctx.as_input(even)
        raw = ctx.run(x_even)
        out = ctx.output(raw)
        parts.append(("real even -> real", ratio(norm2(out.imag), norm2(out)), x_even, raw))
        if n >= 3:
            x_odd = ctx.as_input(odd)
            raw = ctx.run(x_odd)
            out = ctx.output(raw)
            parts.append(("real odd -> imaginary", ratio(norm2(out.real), norm2(out)), x_odd, raw))
    tol = ctx.limit + ctx.rounding
    worst = max(parts, key=lambda p: p[1] if np.isfinite(p[1]) else float("inf"))
    msg = "; ".join(f"{name}: {fmt_eps(v, case.dtype)}" for name, v, _, _ in parts)
    if n < 3:
        msg += " (no odd part: a real odd signal of length n < 3 is zero)"
    return [ctx.verdict("symmetry", worst[1], tol, msg, worst[2], worst[3])]


def check_modulation(ctx: CheckContext) -> list[CheckRow]:
    """Modulation: x[n] W^(-k0 n) -> X[k - k0] (fft; the conjugate ramp for ifft).

    rfft: x[n] cos(2 pi k0 n / N) -> (X[k - k0] + X[k + k0]) / 2 with X the Hermitian
    extension of the half spectrum; irfft: the same spectrum combination must multiply the
    output by cos(2 pi k0 n / N). Source: Oppenheim & Schafer, 3rd ed., Table 8.2 (from
    memory). Relative to the sum of the computed transforms' norms (sqrt(2) for an extended
    half spectrum): at most ``limit`` plus rounding.
    """
    case, n = ctx.case, ctx.case.n
    if n < 2:
        return [ctx.row("modulation", "skip", message="n = 1 has no non-zero frequency")]
    k0 = int(ctx.rng("modulation").integers(1, n))
    x = ctx.random_input("modulation")
    raw = ctx.run(x)
    fx = ctx.output(raw)
    w = ctx.work_dtype
    j = np.arange(n, dtype=np.int64)
    if case.kind in ("fft", "ifft"):
        sign = -1 if case.is_inverse else 1
        lhs = ctx.transform(ctx.as_input(x.astype(w) * phases(sign * j * k0, n, w)))
        rhs = np.roll(fx, k0)
        s = norm2(lhs) + norm2(fx)
    elif case.kind == "rfft":
        cosine = phases(j * k0, n, w).real
        lhs = ctx.transform(ctx.as_input(x.astype(w) * cosine))
        full = hermitian_full(fx, n)
        rhs = ((np.roll(full, k0) + np.roll(full, -k0)) / 2)[: case.output_length]
        s = norm2(lhs) + SQRT2 * norm2(fx)
    else:
        full = hermitian_full(x.astype(w), n)
        spec = ((np.roll(full, k0) + np.roll(full, -k0)) / 2)[: case.input_length]
        lhs = ctx.transform(ctx.as_input(spec))
        rhs = fx * phases(j * k0, n, w).real
        s = norm2(lhs) + norm2(fx)
    value = relative(lhs - rhs, s)
    msg = f"modulation by k0 = {k0}: off by {fmt_eps(value, case.dtype)}"
    return [ctx.verdict("modulation", value, ctx.limit + ctx.rounding, msg, x, raw)]
