"""The value checks against exactly formed results: ``convolution`` (the circular
convolution of small integer inputs, formed without rounding) and ``pairs`` (closed-form
transform pairs, :mod:`fftgauge.harness.battery.pairs`). Tolerances follow the rule stated in
:mod:`fftgauge.harness.battery.value_checks`.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from fftgauge.harness.battery import bounds
from fftgauge.harness.battery.context import SQRT2, CheckContext, fmt_eps, norm2, ratio, relative
from fftgauge.harness.battery.value_checks import companion_fault
from fftgauge.harness.cases import Case
from fftgauge.harness.dft import hermitian_full
from fftgauge.harness.rows import CheckRow

#: Largest n for which ``convolution`` forms the exact circular convolution by direct sums
#: (``numpy.convolve`` on the integers held in float64, exact: see
#: :func:`exact_circular_convolution`); above it the exact result comes from transforms in
#: double (the reference of a float32 case) rounded to the integers it must be (see
#: :func:`circular_convolution`).
#: The direct sums cost O(n^2): at 512 they take about as long as the three transforms
#: (measured 0.14 ms each way), at 4096 about 7 times longer.
DIRECT_CONVOLUTION_MAX_N = 512
#: Integer inputs of ``convolution`` lie in [-CONVOLUTION_RANGE, CONVOLUTION_RANGE].
CONVOLUTION_RANGE = 8


def integer_input(ctx: CheckContext, purpose: str) -> np.ndarray:
    """Return a random input of small integers (exact in every precision), valid for the case."""
    case = ctx.case
    rng = ctx.rng(purpose)
    r = CONVOLUTION_RANGE
    re = rng.integers(-r, r + 1, case.input_length)
    if case.kind == "rfft":
        return re.astype(case.input_dtype)
    im = rng.integers(-r, r + 1, case.input_length)
    return ctx.as_input(re + 1j * im)


def exact_circular_convolution(xf: np.ndarray, yf: np.ndarray) -> np.ndarray:
    """Return the circular convolution of two complex arrays of integers, exactly (complex128).

    The real and imaginary parts come from three real linear convolutions (``numpy.convolve``)
    wrapped modulo n, as in Gauss's three-multiplication complex product: with
    ``rr = xr * yr``, ``ii = xi * yi`` and ``ss = (xr + xi) * (yr + yi)``, the real part is
    ``rr - ii`` and the imaginary part ``ss - rr - ii`` (the convolution is bilinear). They run
    on the integers held in float64, which is exact: every product and every partial sum is an
    integer of magnitude at most ``n (2 CONVOLUTION_RANGE)^2`` (about 1.3 x 10^5 at n = 512), far
    below 2^53, so no rounding happens whatever order the sums are taken in (IEEE Std
    754-2019: integers up to 2^53 and their sums and products below it are exact in binary64),
    and the result is the same integers as the four-convolution form. Float64 rather than
    int64 because numpy sums float64 products with vectorised dot products, several times faster.
    """
    n = xf.shape[0]
    xr, xi = np.rint(xf.real), np.rint(xf.imag)
    yr, yi = np.rint(yf.real), np.rint(yf.imag)

    def circ(a: np.ndarray, b: np.ndarray) -> np.ndarray:
        lin = np.convolve(a, b)
        out = lin[:n].copy()
        out[: lin.shape[0] - n] += lin[n:]
        return out

    rr, ii = circ(xr, yr), circ(xi, yi)
    return (rr - ii) + 1j * (circ(xr + xi, yr + yi) - rr - ii)


def circular_convolution(ctx: CheckContext, x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Return the exact circular convolution of two integer-valued inputs (complex128, integers).

    For irfft (inputs are half spectra) it is the half of the convolution of the Hermitian
    extensions, which is again Hermitian with real DC and Nyquist values.

    Above :data:`DIRECT_CONVOLUTION_MAX_N` it is ``ifft(fft(x) fft(y))`` computed in double
    (the reference transforms of float32 cases: the integer inputs are exact in double) and
    rounded to integers. That rounding gives the exact integers while the error stays below
    1/2: the error of a convolution by floating-point FFTs is at most about
    ``c log2(n) u norm(x) norm(y)`` (u = 2^-53; the bound of Percival, "Rapid multiplication
    modulo the sum and difference of highly composite numbers", Math. Comp. 72 (2003) 387-395,
    for power-of-two n; other n, by Bluestein's algorithm, cost a constant factor more), about
    10^-6 at n = 10^6 with entries of at most ``CONVOLUTION_RANGE`` (tests/test_checks.py
    measures it at the largest entries); a residual above 0.25 from the nearest integers stops
    the check (an ``error`` row) rather than give a wrong target.
    """
    case, n = ctx.case, ctx.case.n
    if case.kind == "irfft":
        xf, yf = hermitian_full(x.astype(np.complex128), n), hermitian_full(y.astype(np.complex128), n)
    else:
        xf, yf = x.astype(np.complex128), y.astype(np.complex128)
    if n <= DIRECT_CONVOLUTION_MAX_N:
        z = exact_circular_convolution(xf, yf)
    else:
        fwd = Case("fft", "float32", n)  # the double reference: a float32 case's ground truth
        inv = Case("ifft", "float32", n)
        prod = ctx.reference_fn(xf, fwd).values() * ctx.reference_fn(yf, fwd).values()
        approx = ctx.reference_fn(prod, inv).values()
        z = np.rint(approx.real.astype(np.float64)) + 1j * np.rint(approx.imag.astype(np.float64))
        off = float(np.max(np.abs(approx - z))) if n else 0.0
        if off > 0.25:
            raise RuntimeError(f"exact convolution could not be formed (rounding residual {off:.3g})")
    return z[: case.input_length] if case.kind == "irfft" else z


def check_convolution(ctx: CheckContext) -> list[CheckRow]:
    """Circular convolution theorem: F(x) F(y) / c = F(x (*) y), c the normalisation factor.

    The inputs are small random integers, so the circular convolution z is formed exactly
    (sums of integer products, :func:`exact_circular_convolution`; for large n the reference
    transforms rounded to integers). With the
    companion inverse, inverse(F(x) F(y) / c) is compared with z; without it, F(x) F(y) / c
    with the reference transform of z. For irfft (spectra in, signals out) the product is of
    the outputs and z convolves the Hermitian spectra. Source: Oppenheim & Schafer, 3rd ed.,
    Table 8.2 (from memory). Tolerance: an elementwise product of transforms with errors
    e_x, e_y is off by at most norm(e_x) max|F(y)| + max|F(x)| norm(e_y) (+ their product),
    i.e. ``limit`` times S = (norm F(x) max|F(y)| + max|F(x)| norm F(y)) / |c|, relative to
    norm F(z); the inverse carries that through (sqrt(2) for half spectra) and adds its own
    ``limit``.
    """
    case = ctx.case
    x, y = integer_input(ctx, "convolution-x"), integer_input(ctx, "convolution-y")
    raw = ctx.run(x)
    fx, fy = ctx.output(raw), ctx.transform(y)
    c = ctx.scale
    product = fx * fy / c
    z = circular_convolution(ctx, x, y)
    s = (norm2(fx) * float(np.max(np.abs(fy))) + float(np.max(np.abs(fx))) * norm2(fy)) / abs(float(c))
    carried = (ctx.limit + ctx.limit**2) * ratio(s, norm2(product)) + 2 * ctx.unit_roundoff
    plan, comp, _ = ctx.companion()
    if plan is not None:
        back = ctx.transform(ctx.as_input(product, comp), plan, comp)
        target = z.astype(ctx.work_dtype)
        value = relative(back - target, norm2(target))
        g = SQRT2 if case.is_real else 1.0
        tol = bounds.accuracy_limit(comp) + g * carried + ctx.rounding
        how = f"{comp.kind}(F(x) F(y) / c) vs the exact circular convolution"
        if not (np.isfinite(value) and value <= tol):
            code, why = companion_fault(ctx, comp, target, back, subject="the trip gives the convolution")
            return [ctx.row("convolution", "fail", value, tol, diagnosis=code,
                            message=f"{how}: off by {fmt_eps(value, case.dtype)}; {why}")]
    else:
        ref = ctx.reference_fn(ctx.as_input(z), case)
        value = relative(product - ref.values().astype(ctx.work_dtype), norm2(ref.hi))
        tol = carried + ctx.rounding
        how = f"F(x) F(y) / c vs the exact transform of the exact circular convolution (no {comp.kind} to invert)"
    msg = f"{how}: off by {fmt_eps(value, case.dtype)}"
    return [ctx.verdict("convolution", value, tol, msg, x, raw)]


# -- closed-form pairs ---------------------------------------------------------------------------

def pair_setup(case: Case, pair: Any) -> tuple[np.ndarray, np.ndarray, str] | None:
    """Return (input values, expected unnormalised output, compare mode) of ``pair`` for ``case``,
    or None when the pair does not fit the kind.

    fft: the pair itself. ifft: conj(signal) -> conj(transform) (the inverse-sign sum of the
    conjugate is the conjugate of the forward sum). rfft: real signals only, the first N//2+1
    values. irfft: real signals with a full closed form only, by duality: the half of
    conj(transform) goes in, N signal[-n] comes out (the DFT applied twice reverses and
    multiplies by N).
    """
    from fftgauge.harness.battery.pairs import pair_values

    n = case.n
    s, t = pair_values(pair, n)
    if case.kind == "fft":
        return s, t, pair.compare
    if case.kind == "ifft":
        return np.conj(s), np.conj(t), pair.compare
    if case.kind == "rfft":
        if not pair.real:
            return None
        return s.real, t[: n // 2 + 1], pair.compare
    if not pair.real or pair.compare != "full":
        return None
    return np.conj(t)[: n // 2 + 1], n * s[(-np.arange(n)) % n], "full"


def check_pairs(ctx: CheckContext) -> list[CheckRow]:
    """Known transform pairs with closed forms (:data:`fftgauge.harness.battery.pairs.PAIRS`, each naming its source).

    Each applicable pair's signal is transformed and compared with the closed form times the
    case's normalisation, as the pair says: ``full`` (every value), ``magnitude`` (|X[k]|
    only) or ``bin0`` (X[0] only, measured against norm2 of the whole exact output). One
    transform against an exact value, at most ``limit``; rounding the signal to the case's
    precision and the closed form's evaluation in double add
    :func:`fftgauge.harness.battery.pairs.closed_form_allowance` (times sqrt(2) for irfft, whose input is a
    half spectrum standing for a full one).
    """
    from fftgauge.harness.battery.pairs import PAIRS, closed_form_allowance

    case = ctx.case
    w = ctx.work_dtype
    tol = ctx.limit + (SQRT2 if case.kind == "irfft" else 1.0) * closed_form_allowance(case.dtype)
    results = []
    for pair in PAIRS:
        if not pair.applies(case.n):
            continue
        setup = pair_setup(case, pair)
        if setup is None:
            continue
        values, expected, mode = setup
        x = ctx.as_input(values)
        raw = ctx.run(x)
        y = ctx.output(raw)
        e = expected.astype(w) * ctx.scale
        if mode == "full":
            value = relative(y - e, norm2(e))
        elif mode == "magnitude":
            value = relative(np.abs(y) - np.abs(e), norm2(e))
        else:
            energy = norm2(x.astype(w)) * abs(float(ctx.scale)) * np.sqrt(case.n)  # norm2 of the full output
            value = ratio(float(abs(y[0] - e[0])), energy)
        results.append((value, pair.name, mode, x, raw))
    if not results:
        return [ctx.row("pairs", "skip", message=f"no closed-form pair applies to {case.kind} n = {case.n}")]
    worst = max(results, key=lambda r: r[0] if np.isfinite(r[0]) else float("inf"))
    failing = [r[1] for r in results if not (np.isfinite(r[0]) and r[0] <= tol)]
    msg = (f"{len(results)} pairs ({', '.join(r[1] for r in results)}); worst {worst[1]} ({worst[2]}): "
           f"{fmt_eps(worst[0], case.dtype)}")
    if failing:
        msg += f"; failing: {', '.join(failing)}"
    return [ctx.verdict("pairs", worst[0], tol, msg, worst[3], worst[4])]
