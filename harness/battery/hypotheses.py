"""The hypotheses of the bug diagnosis: for an input and its exact transform, the output each
common FFT bug would give (opposite sign, conjugate, bit-reversed order, circular shift,
dropped imaginary part, changed size). :mod:`fftgauge.harness.battery.diagnosis` tests them.
"""

from __future__ import annotations

from typing import Any, Callable

import numpy as np

from fftgauge.harness.cases import Case
from fftgauge.harness.dft import bit_reversal_permutation, hermitian_full, is_power_of_two

ReferenceFn = Callable[[np.ndarray, Case], Any]


def plausible_sizes(n: int) -> list[int]:
    """Return lengths a buggy backend may have used instead of ``n``: next/previous power of two,
    n +- 1, 2n, the nearest 5-smooth sizes above and below."""
    out = []
    up = 1 << max(0, (n - 1).bit_length())
    if up == n:
        up = 2 * n
    out.append(up)
    down = 1 << max(0, n.bit_length() - 1)
    if down == n:
        down = n // 2
    out.append(down)
    out += [n + 1, n - 1, 2 * n]

    def smooth(m: int) -> bool:
        for p in (2, 3, 5):
            while m % p == 0:
                m //= p
        return m == 1

    above = n + 1
    while not smooth(above):
        above += 1
    below = n - 1
    while below > 1 and not smooth(below):
        below -= 1
    out += [above, below]
    seen: list[int] = []
    for m in out:
        if m >= 1 and m != n and m not in seen:
            seen.append(m)
    return seen


def resize_input(x: np.ndarray, length: int) -> np.ndarray:
    """Return ``x`` zero-padded or truncated to ``length`` values."""
    out = np.zeros(length, dtype=x.dtype)
    k = min(length, x.shape[0])
    out[:k] = x[:k]
    return out


def _shift_candidates(truth: np.ndarray, y: np.ndarray) -> list[int]:
    """Return the circular shifts worth testing: fftshift/ifftshift, +-1, and those that line
    up the largest values of ``y`` with the largest of the truth."""
    length = truth.shape[0]
    if length < 2:
        return []
    shifts = [length // 2, (length + 1) // 2, 1, length - 1]
    top = min(3, length)
    peaks_t = np.argsort(-np.abs(truth))[:top]
    peaks_y = np.argsort(-np.abs(y))[:top]
    shifts += [int((py - pt) % length) for py in peaks_y for pt in peaks_t]
    out: list[int] = []
    for s in shifts:
        s %= length
        if s and s not in out:
            out.append(s)
    return out


def _shift_words(s: int, length: int) -> str:
    if s == length // 2:
        what = "an fftshift-centred spectrum (zero frequency moved to the middle)"
    elif s == (length + 1) // 2:
        what = "an ifftshift applied to the spectrum"
    else:
        what = "the output index is offset"
    return f"outputs are right but circularly shifted by {s} bin{'s' if s != 1 else ''}: {what}"


def candidates(case: Case, x: np.ndarray, truth: np.ndarray, y: np.ndarray,
                reference_fn: ReferenceFn) -> list[tuple[str, str, np.ndarray]]:
    """Return ``(code, words, candidate)`` for every structural hypothesis, the truth itself first."""
    n, kind = case.n, case.kind
    out: list[tuple[str, str, np.ndarray]] = [("scale", "", truth)]
    forward = not case.is_inverse
    wanted, other = ("-", "+") if forward else ("+", "-")
    opposite = (f"output matches the transform with the opposite exponent sign ({other} where {wanted} is "
                f"required): X[k] and X[N-k] are swapped")
    if kind in ("fft", "ifft"):
        out.append(("sign", opposite, truth[(-np.arange(n)) % n]))
        out.append(("sign", "output is the complex conjugate of the right one", np.conj(truth)))
    elif kind == "rfft":
        out.append(("sign", opposite + " (for a real input: the conjugate)", np.conj(truth)))
    else:  # irfft: the output is real, the opposite sign reverses it in time
        out.append(("sign", opposite + " (for irfft: the output is reversed in time)", truth[(-np.arange(n)) % n]))
    if is_power_of_two(n) and n >= 4:
        perm = bit_reversal_permutation(n)
        words = ("outputs are right but in bit-reversed order: the final reordering of a "
                 "decimation-in-frequency FFT is missing")
        if kind == "rfft":
            full = hermitian_full(truth, n, np.complex128)
            out.append(("bit-reversed", words, full[perm][: truth.shape[0]]))
        else:
            out.append(("bit-reversed", words, truth[perm]))
    for s in _shift_candidates(truth, y):
        out.append(("shifted", _shift_words(s, truth.shape[0]), np.roll(truth, s)))
    if kind != "rfft" and np.any(np.imag(x) != 0):
        xr = np.real(x).astype(x.dtype)
        ref = reference_fn(xr, case)
        out.append(("real-only", "output matches the transform of the real part of the input: the imaginary "
                                 "part is ignored", values128(ref)))
    for m in plausible_sizes(n):
        other_case = Case(kind, case.dtype, m, case.norm)
        if other_case.output_length < truth.shape[0]:
            # the input truncated to m values, transformed at the asked length
            xt = resize_input(resize_input(x, other_case.input_length), case.input_length)
            dropped = case.input_length - other_case.input_length
            words = (f"output is the transform of the input truncated to {other_case.input_length} values "
                     f"(the last {dropped} ignored, as for a transform of size {m})")
            out.append(("truncated-size", words, values128(reference_fn(xt, case))))
        else:
            xp = resize_input(x, other_case.input_length)
            full = values128(reference_fn(xp, other_case))
            words = (f"output is the first {truth.shape[0]} values of the transform of the input zero-padded "
                     f"to {m}{' (the next power of two)' if is_power_of_two(m) and m > n else ''}")
            out.append(("truncated-size", words, full[: truth.shape[0]]))
    return out


def values128(ref: Any) -> np.ndarray:
    """Return a reference's values as complex128 (plenty for telling hypotheses apart)."""
    return np.asarray(ref.values()).astype(np.complex128)
