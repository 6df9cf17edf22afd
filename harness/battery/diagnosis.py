"""Bug diagnosis: when an output is wrong, which common FFT bug explains it.

:func:`diagnose` takes an input ``x``, the output ``y`` a backend gave for it and the
ground truth (through a reference function), and tests one hypothesis after another. Each
hypothesis is a *candidate* output, built from the exact transform by the change a
particular bug makes (reversing the frequency axis, conjugating, bit-reversing the order,
rolling it, dropping the input's imaginary part, changing the length). A candidate matches
when ``y`` equals it up to one constant factor (fitted by least squares) to within
:data:`MATCH_RELATIVE`; the constant itself names the ``scale`` bug (N, 1/N, sqrt(N),
1/sqrt(N), ...). When no candidate matches, the size of the error is compared with the
precisions below the one asked for (``precision``, or ``dtype`` when the output array itself
has a lower-precision dtype); else the code is ``unknown``.

Two rules keep a match honest. A constant is fitted only where the output has more real
values than twice the constant's parameters (n = 1 or 2 otherwise: every candidate fits one
complex value); there the candidate may only be scaled by 1, N, 1/N, sqrt(N) or 1/sqrt(N)
(:func:`fixed_factors`). A candidate that equals the truth up to a scale on the given input
(a zero-padded transform of a DC-only spectrum, say) is no evidence for itself and is skipped.
A small uniform scale (1 + 1.5e-5) is ``scale``, with its factor.

Codes and what is tested, in this order (the first match wins when two explain ``y``
equally well, for example on an input whose transform is symmetric):

============== =======================================================================
code            hypothesis
============== =======================================================================
dtype           output not of a floating-point dtype (or, after the structural tests,
                of a lower precision than asked, with errors at that precision's level)
shape           output not 1-D, or of a length no changed transform size explains
truncated-size  output equals the transform of the input zero-padded or truncated to
                another length m (next or previous power of two, N +- 1, 2N, the nearest
                5-smooth sizes), whether the output has length m or N
nonfinite       NaN or Inf in the output of a finite input
scale           output equals the exact transform times a constant
sign            output equals the opposite-sign transform (X[k] <-> X[N-k]) or the
                complex conjugate, possibly scaled (an inverse computed for a forward)
bit-reversed    output equals the exact transform in bit-reversed order (N = 2^t >= 4)
shifted         output equals the exact transform circularly shifted by s bins
real-only       output equals the transform of the real part of the input
overflow        (tested before the candidates) only the outputs of largest magnitude are
                wrong, some with the sign flipped: a fixed-point sum wrapped around
localised       (after the candidates) the error sits in a few output bins (or one half of
                the spectrum), the rest are right: one wrong twiddle or butterfly (:mod:`~fftgauge.harness.battery.localise`
                names the bins and, for a power of two, the radix-2 stage), or one wrong line of
                the last mixed-radix pass (:mod:`~fftgauge.harness.battery.radix_pass`: a leg's
                twiddle exponent or table, the butterfly matrix); never ``precision``
time-shifted    every bin off by a phase growing linearly with k: the input delayed by d
                samples, d possibly fractional (DFT shift theorem)
precision       right structure, error spread over the bins, between 0.1 unit roundoff
                and a few times the accuracy limit of a lower precision (float32 under float64 or long
                double, float64 under long double, float16 under float32)
unknown         none of the above
============== =======================================================================
"""

from __future__ import annotations

from typing import Any

import numpy as np

from fftgauge.harness.cases import Case
from fftgauge.harness.battery.hypotheses import ReferenceFn, candidates, resize_input, values128
from fftgauge.harness.battery.localise import Localisation, inverse_delay, localise_error
from fftgauge.harness.battery.radix_pass import pass_error
from fftgauge.harness.dft import is_power_of_two, machine_epsilon, norm_factor, scale_factor, unit_roundoff

#: A candidate matches when ``norm(y - a * candidate) / norm(a * candidate)`` is below this
#: for the best constant ``a``. Far above any FFT's rounding error in float32 (about 1e-6)
#: and far below the distance between two different hypotheses for a generic input (of
#: order 1), so a match is unambiguous.
MATCH_RELATIVE = 1e-3

#: ``overflow``: the outputs at least this fraction of the largest magnitude are "the largest".
OVERFLOW_FRACTION = 0.5

#: A fitted constant within this relative distance of 1 is "no scaling".
UNIT_FACTOR_RELATIVE = 1e-3

#: ``precision``: the error must be at least this many unit roundoffs of the lower
#: precision (rounding a result to that precision alone gives about 0.3 of one).
PRECISION_LOW_UNITS = 0.1
#: ``precision``: and at most this many times the accuracy limit scaled to that precision.
PRECISION_HIGH_FACTOR = 8.0

_LOWER_PRECISIONS = {
    "float32": ("float16",),
    "float64": ("float32",),
    "longdouble": ("float64", "float32"),
}
# -- small helpers ---------------------------------------------------------------------------

def _norm(v: np.ndarray) -> float:
    """Return the 2-norm of ``v`` as a float (computed in the array's own precision)."""
    v = np.asarray(v)
    if v.size == 0:
        return 0.0
    return float(np.sqrt(np.sum(np.abs(v) ** 2)))


def _fit(candidate: np.ndarray, y: np.ndarray, factors: tuple[float, ...] | None = None) -> tuple[complex, float]:
    """Return ``(a, r)``: the constant ``a`` with ``y ~ a * candidate`` and the relative
    residual ``norm(y - a c) / norm(a c)`` (``inf`` when ``a c`` is zero).

    ``a`` is the least-squares complex constant, or, when ``factors`` is given, the one of
    those fixed factors with the smallest residual (no constant is fitted).
    """
    cc = np.vdot(candidate, candidate).real
    if cc == 0.0 or not np.isfinite(cc):
        return 0j, float("inf")
    if factors is None:
        choices: tuple[complex, ...] = (complex(np.vdot(candidate, y) / cc),)
    else:
        choices = tuple(complex(f) for f in factors)
    best = (0j, float("inf"))
    for a in choices:
        scaled = a * candidate
        denom = _norm(scaled)
        r = _norm(y - scaled) / denom if denom else float("inf")
        if not r >= best[1]:
            best = (a, r)
    return best


#: Real free parameters of a fitted complex constant.
CONSTANT_PARAMETERS = 2


def fixed_factors(case: Case) -> tuple[float, ...] | None:
    """Return the fixed factors a candidate may be scaled by for ``case``, or None when a
    complex constant may be fitted.

    A fitted constant makes any candidate match once the output has no more real values
    than twice the constant's parameters (n = 1: one complex value, which every candidate
    fits): up to that, a candidate is scaled only by 1, N, 1/N, sqrt(N) or 1/sqrt(N).
    """
    return _factors_for(case.output_length * (1 if case.kind == "irfft" else 2), case.n)


def _factors_for(real_values: int, n: int) -> tuple[float, ...] | None:
    if real_values > 2 * CONSTANT_PARAMETERS:
        return None
    return tuple(dict.fromkeys((1.0, float(n), 1.0 / n, float(np.sqrt(n)), 1.0 / float(np.sqrt(n)))))


def factor_name(value: float, n: int) -> str:
    """Return a plain name for a positive scale factor: ``N``, ``1/N``, ``sqrt(N)``, ``1/sqrt(N)``, ``1``.

    Falls back to the number (``'2.5'``) when it is none of these for this ``n``.
    """
    if n > 1:
        named = ((1.0, "1"), (float(n), "N"), (1.0 / n, "1/N"), (np.sqrt(n), "sqrt(N)"),
                 (1.0 / np.sqrt(n), "1/sqrt(N)"), (n * np.sqrt(n), "N sqrt(N)"), (float(n) ** 2, "N^2"),
                 (1.0 / n**2, "1/N^2"))
        for v, name in named:
            if abs(value - v) <= UNIT_FACTOR_RELATIVE * v:
                return name
    elif abs(value - 1.0) <= UNIT_FACTOR_RELATIVE:
        return "1"
    return f"{value:.6g}"


def _is_unit(a: complex) -> bool:
    return abs(a - 1.0) <= UNIT_FACTOR_RELATIVE


def _scale_words(case: Case, a: complex, n: int, declared_scale: str | None = None) -> str:
    """Return the plain-words account of an output that is ``a`` times the right one
    (``declared_scale``: the factor the backend declared, see :func:`diagnose`)."""
    if abs(a.imag) > UNIT_FACTOR_RELATIVE * abs(a) or a.real <= 0:
        return f"output is off by a constant factor {a:.4g}"
    ratio = a.real
    if _is_unit(a):
        return (f"output is {ratio:.7g} times the right one: a uniform scale error of {ratio - 1:+.3g} "
                f"(a rounded or fixed-point normalisation factor, for example)")
    if ratio > 1:
        head = f"output is {factor_name(ratio, n)} times too large"
    else:
        head = f"output is {factor_name(1.0 / ratio, n)} times too small"
    if declared_scale is not None:
        declared = scale_factor(n, declared_scale)
        which = "inverse_scale" if case.is_inverse else "forward_scale"
        return (f"{head}: it scales by {factor_name(declared * ratio, n)} where it declares "
                f"{factor_name(declared, n)} ({which}={declared_scale})")
    due = norm_factor(n, case.norm, case.is_inverse)
    got = due * ratio
    due_name, got_name = factor_name(due, n), factor_name(got, n)
    words = f"{head}: it is scaled by {got_name} where {due_name} is due"
    if got_name == "1" and due_name == "1/N":
        which = "inverse transform" if case.is_inverse else "forward transform (norm='forward')"
        words += f" (the 1/N of the {which} is missing)"
    elif got_name == "1" and due_name == "1/sqrt(N)":
        words += " (the 1/sqrt(N) of norm='ortho' is missing)"
    elif got_name == "1/N" and due_name == "1":
        words += " (a 1/N is applied where the convention puts none)"
    elif got_name == "1/sqrt(N)" and due_name != "1/sqrt(N)":
        words += " (ortho scaling applied)"
    return words


def _with_scale(words: str, a: complex, n: int) -> str:
    if _is_unit(a):
        return words
    if abs(a.imag) <= UNIT_FACTOR_RELATIVE * abs(a) and a.real > 0:
        return f"{words}, and scaled by {factor_name(a.real, n)}"
    return f"{words}, and multiplied by {a:.4g}"


def _wrong_length(case: Case, x: np.ndarray, y: np.ndarray, reference_fn: ReferenceFn) -> tuple[str, str]:
    """Diagnose an output of the wrong length: a changed transform size, else ``shape``."""
    length, expected = y.shape[0], case.output_length
    sizes = [length] if case.kind != "rfft" else [2 * (length - 1), 2 * length - 1]
    yc = y.astype(np.complex128)
    for m in sizes:
        if m < 1 or m == case.n:
            continue
        other_case = Case(case.kind, case.dtype, m, case.norm)
        if other_case.output_length != length:
            continue
        cand = values128(reference_fn(resize_input(x, other_case.input_length), other_case))
        a, r = _fit(cand, yc)
        if r <= MATCH_RELATIVE:
            how = "zero-padded" if m > case.n else "truncated"
            extra = " (the next power of two)" if how == "zero-padded" and is_power_of_two(m) else ""
            return ("truncated-size", _with_scale(
                f"output has {length} values where {expected} are due: it is the transform of the input "
                f"{how} to {m}{extra}", a, m))
    return "shape", f"output has {length} values where {expected} are due"


def _precision_level(case: Case, err: float, limit: float) -> str | None:
    """Return the lower precision whose level ``err`` is at, or None."""
    for lower in _LOWER_PRECISIONS.get(case.dtype, ()):
        u_lower = unit_roundoff(lower)
        high = PRECISION_HIGH_FACTOR * limit * machine_epsilon(lower) / machine_epsilon(case.dtype)
        if PRECISION_LOW_UNITS * u_lower <= err <= high:
            return lower
    return None


def _lower_dtype(case: Case, y: np.ndarray) -> bool:
    """True when ``y``'s dtype is of lower precision than the case's output dtype."""
    return float(np.finfo(y.dtype).eps) > float(np.finfo(case.output_dtype).eps)


def overflow_words(truth: np.ndarray, y: np.ndarray) -> str | None:
    """Return the account of a wrap-around overflow in ``y``, or None when ``y`` shows none.

    Fixed-point arithmetic that overflows wraps around: the outputs of largest magnitude come
    out with the opposite sign (or past the other rail), the rest are right. The pattern: every
    wrong output is among the largest ones (``|X[k]| >= OVERFLOW_FRACTION max |X|``), those
    largest ones are a minority of the outputs (on an input whose outputs are all equally large
    a flipped sign is a ``scale`` of -1, not an overflow), the outputs outside them are right to
    within ``MATCH_RELATIVE`` of the whole, and at least one wrong output has a real or
    imaginary part of the opposite sign to the right one's, where that part is itself large.
    """
    mag = np.abs(truth)
    top = float(np.max(mag)) if mag.size else 0.0
    if top == 0.0:
        return None
    big = mag >= OVERFLOW_FRACTION * top
    if 2 * int(np.count_nonzero(big)) > truth.shape[0]:
        return None
    err = y - truth
    if _norm(err[~big]) > MATCH_RELATIVE * _norm(truth):
        return None
    wrong = big & (np.abs(err) > MATCH_RELATIVE * mag)
    flipped = np.zeros_like(wrong)
    for part in (np.real, np.imag):
        t_part, y_part = part(truth), part(y)
        flipped |= wrong & (np.abs(t_part) >= OVERFLOW_FRACTION * top) & (np.sign(y_part) == -np.sign(t_part))
    if not np.any(flipped):
        return None
    where = np.flatnonzero(wrong)
    shown = ", ".join(map(str, where[:6])) + (", ..." if where.shape[0] > 6 else "")
    count = where.shape[0]
    which = f"the {count} outputs of largest magnitude ({shown}) are" if count > 1 else \
        f"the output of largest magnitude ({shown}) is"
    return (f"wrap-around overflow: only {which} wrong, {int(np.count_nonzero(flipped))} with the sign flipped, as "
            f"fixed-point arithmetic gives when a sum passes the top of its range; the other outputs are right")


def localised(case: Case, x: np.ndarray, truth: np.ndarray, y: np.ndarray, reference_fn: ReferenceFn,
              limit: float | None) -> Localisation:
    """Return where the error of ``y`` lives: :func:`~fftgauge.harness.battery.localise.localise_error`,
    and for an error spread over the bins the wrong line of the combining pass
    (:func:`~fftgauge.harness.battery.radix_pass.pass_error`, kind ``pass``), then the delay of an
    inverse's output (:func:`~fftgauge.harness.battery.localise.inverse_delay`)."""
    found = localise_error(case, truth, y, limit)
    if found.structured:
        return found
    wrong = pass_error(case, x, truth, y, reference_fn)
    if wrong is not None:
        return Localisation("pass", wrong.detail, where=wrong.where, likely=wrong.likely)
    if case.is_inverse:
        fcase = Case("fft" if case.kind == "ifft" else "rfft", case.dtype, case.n, case.norm)
        real = case.kind == "irfft"

        def forward(v: np.ndarray) -> np.ndarray:
            return values128(reference_fn(np.real(v) if real else v, fcase))

        delayed = inverse_delay(case, truth, y, forward)
        if delayed is not None:
            return delayed
    return found


# -- the entry points --------------------------------------------------------------------------

def diagnose(case: Case, x: np.ndarray, y: Any, reference_fn: ReferenceFn | None = None,
             limit: float | None = None, declared_scale: str | None = None) -> tuple[str, str]:
    """Return the most likely bug behind a wrong output, as ``(code, message)``.

    Parameters
    ----------
    case : the transform that was asked for.
    x : the input exactly as the backend received it.
    y : what the backend returned (any array-like; wrong shapes and dtypes are diagnosed).
    reference_fn : ``reference_fn(x, case) -> Reference`` (an object with ``values()``);
        :func:`fftgauge.harness.battery.reference.reference_transform` when None.
    limit : the relative 2-norm error limit of ``case``
        (:func:`fftgauge.harness.battery.bounds.accuracy_limit` when None); used to place an error at the
        level of a lower precision.
    declared_scale : the scale the backend declared for this kind (``"1/n"``, see
        :data:`fftgauge.harness.dft.SCALES`), when ``y`` is its output with that scale
        undone; a ``scale`` finding then names the declared factor and the one applied
        (``"it scales by 1/sqrt(N) where it declares 1/N"``).

    Returns
    -------
    tuple of str
        ``code`` from the contracts' diagnosis vocabulary (never ``None``: call this only
        for an output that failed) and a one-line message in plain words, for example
        ``("bit-reversed", "outputs are right but in bit-reversed order: ...")``.

    Raises
    ------
    Whatever ``reference_fn`` raises (for example ``ValueError`` for an ``x`` of the wrong
    length); a wrong ``y`` never raises.

    Examples
    --------
    >>> import numpy as np
    >>> x = np.random.default_rng(0).normal(size=16) + 0j
    >>> diagnose(Case("fft", "float64", 16), x, 16 * np.fft.fft(x))[0]   # doctest: +SKIP
    'scale'
    """
    if reference_fn is None:
        from fftgauge.harness.battery.reference import reference_transform as reference_fn  # noqa: N813
    if limit is None:
        from fftgauge.harness.battery.bounds import accuracy_limit
        limit = accuracy_limit(case)
    x = np.asarray(x)
    try:
        y = np.asarray(y)
    except Exception:  # noqa: BLE001 - whatever it is, it is not an array
        return "dtype", f"output is a {type(y).__name__}, not an array of numbers"
    if y.dtype.kind not in "fc":
        return "dtype", f"output has dtype {y.dtype}, not a floating-point or complex type"
    if y.ndim != 1:
        if y.size == case.output_length:
            return "shape", f"output has shape {y.shape} where a 1-D array of {case.output_length} is due"
        return "shape", f"output has shape {y.shape} where ({case.output_length},) is due"
    if y.shape[0] != case.output_length:
        return _wrong_length(case, x, y, reference_fn)
    if np.all(np.isfinite(x)) and not np.all(np.isfinite(y)):
        bad = int(np.count_nonzero(~np.isfinite(y)))
        return "nonfinite", f"output has {bad} NaN/Inf value{'s' if bad != 1 else ''} for a finite input"

    ref = reference_fn(x, case)
    truth = values128(ref)
    truth_norm = _norm(truth)
    err = float(np.linalg.norm(ref.error(y))) / truth_norm if truth_norm else float("inf")
    if truth_norm == 0.0:
        return "unknown", "the exact transform of this input is zero, and the output is not"
    y128 = y.astype(np.complex128)
    wrapped = overflow_words(truth, y128)
    if wrapped is not None:
        return "overflow", wrapped
    factors = fixed_factors(case)
    matches = []
    for code, words, cand in candidates(case, x, truth, y128, reference_fn):
        if code != "scale" and _fit(truth, cand, factors)[1] <= MATCH_RELATIVE:
            continue  # on this input the hypothesis is the truth up to a scale: no evidence for itself
        a, r = _fit(cand, y128, factors)
        if r > MATCH_RELATIVE or r * 4 >= max(err, 1e-300):
            continue
        matches.append((r, len(matches), code, words, a))
    if matches:
        _, _, code, words, a = min(matches)
        if code == "scale":
            return "scale", _scale_words(case, a, case.n, declared_scale)
        return code, _with_scale(words, a, case.n)

    eps_case = machine_epsilon(case.dtype)
    units = err / eps_case
    if _lower_dtype(case, y):
        return "dtype", (f"output has dtype {y.dtype}, lower precision than the {case.output_dtype} asked for; "
                         f"relative rms error {units:.3g} eps")
    found = localised(case, x, truth, y128, reference_fn, limit)
    if found.kind in ("bins", "residue", "half", "pass"):
        real = (" (this input is real: if complex inputs are right, look at a real-input fast path)"
                if case.kind in ("fft", "ifft") and x.dtype.kind == "c" and not np.any(x.imag) else "")
        return "localised", f"relative rms error {units:.3g} eps, not rounding: {found.message()}{real}"
    if found.kind == "phase-ramp":
        return "time-shifted", f"relative rms error {units:.3g} eps: {found.message()}"
    level = _precision_level(case, err, limit)
    if level is not None:
        return "precision", (f"errors at the level of {level}: relative rms error {units:.3g} eps of "
                             f"{case.dtype} ({err / machine_epsilon(level):.3g} eps of {level}) with the right structure "
                             f"({found.words}); the transform appears to be computed in {level}")
    return "unknown", (f"relative rms error {err:.3g} ({units:.3g} eps); no single common bug (sign, scale, "
                       f"order, shift, lower precision, changed size, dropped imaginary part) explains it; "
                       f"{found.words}")


def diagnose_round_trip(x: np.ndarray, z: np.ndarray, n: int, reversed_ok: bool = True,
                        subject: str = "the round trip gives the input") -> tuple[str, str]:
    """Return ``(code, message)`` for a round trip ``z`` that should have given back ``x``.

    Tests ``z = a x`` (``scale``: the pair's normalisations do not multiply to 1) and
    ``z = a x[-n]`` (``sign``: both transforms use the same exponent sign, so the trip
    reverses the signal); else ``unknown``. ``reversed_ok`` False skips the reversal test
    (for half spectra, where it has no meaning). ``subject`` starts the message.
    """
    x = np.asarray(x).astype(np.complex128)
    z = np.asarray(z).astype(np.complex128)
    base_err = _norm(z - x) / max(_norm(x), 1e-300)
    factors = _factors_for(2 * x.shape[0], n)
    a, r = _fit(x, z, factors)
    if r <= MATCH_RELATIVE and not _is_unit(a):
        if abs(a.imag) <= UNIT_FACTOR_RELATIVE * abs(a) and a.real > 0:
            ratio = a.real
            big = ratio > 1
            name = factor_name(ratio if big else 1 / ratio, n)
            return "scale", (f"{subject} {name} times too {'large' if big else 'small'}: "
                             f"the two normalisations do not multiply to 1")
        return "scale", f"{subject} times {a:.4g}"
    if reversed_ok and n > 2:
        rev = x[(-np.arange(x.shape[0])) % x.shape[0]]
        a, r = _fit(rev, z, factors)
        if r <= MATCH_RELATIVE and r * 4 < base_err:
            return "sign", _with_scale(f"{subject} reversed in time: both transforms use the same exponent sign",
                                       a, n)
    return "unknown", f"{subject} off by a relative {base_err:.3g}"
