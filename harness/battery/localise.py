"""Bin and stage localisation: where in the output a wrong transform's error lives.

:func:`localise_error` compares an output with the exact transform bin by bin and returns a
:class:`Localisation`, one of:

``bins``
    the error is concentrated in a few bins (at least :data:`CONCENTRATED_SHARE` of its
    energy in at most :data:`FEW_BINS` bins and at most a fraction :data:`FEW_BINS_FRACTION`
    of them). The words say which bins and what they have in common: DC, Nyquist, the pair
    k = N/2 - 1 and N - 1, and, for a power of two N, the radix-2 stage whose butterflies
    those bins share. In a radix-2 decimation-in-time FFT the stage that merges sub-transforms
    of size P into 2P computes X[k] for every k from the sub-transforms' outputs k mod P, with
    the twiddle W_2P^(k mod P); a wrong twiddle or butterfly j of that stage is wrong in every
    bin k = j (mod P) (all N/P of them; fewer when only some sub-transforms are hit), which in
    bit-reversed order is one aligned block of N/P positions: the block of one sub-transform
    of a decimation-in-frequency FFT (Cooley & Tukey, Math. Comp. 19 (1965) 297-301; the stage
    structure as in Oppenheim & Schafer, Discrete-Time Signal Processing, 3rd ed., sec. 9.3-9.4).
``phase-ramp``
    every bin is right in magnitude and off in phase by a phase growing linearly with k:
    the output is the transform of the input delayed by d samples, which may be fractional
    (the DFT shift theorem: a delay of d multiplies X[k] by exp(-2j pi k d / N); Oppenheim &
    Schafer, 3rd ed., Table 8.2). The words give the estimated d.
``residue``
    (fft, ifft, a power of two N) the error lives in one class of bins k = j (mod P) of many
    bins: one sub-transform of a decimation-in-frequency network (see :func:`residue_class`).
``half``
    (fft, ifft) the error lives in one half of the spectrum, the other half right: the half a
    real-input path derives by Hermitian symmetry.
``spread``
    the error is spread over the bins with no structure found: rounding (a lower precision)
    or nondeterminism, not one wrong line of code.

It runs only on a failed output (in the worker, from :func:`~fftgauge.harness.battery.diagnosis.diagnose`),
where the output and the ground truth are both at hand.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import reduce
from math import gcd

import numpy as np

from fftgauge.harness.cases import Case
from fftgauge.harness.dft import bit_reversal_permutation, is_power_of_two

#: Share of the error's energy that "a few bins" must hold.
CONCENTRATED_SHARE = 0.99
#: At most this many bins count as "a few".
FEW_BINS = 16
#: And at most this fraction of the bins.
FEW_BINS_FRACTION = 1 / 8
#: A phase ramp fits when the output equals the ramped truth to within this relative 2-norm
#: (times a constant), and this is at most a quarter of the error without the ramp.
RAMP_MATCH_RELATIVE = 1e-3
#: Bins shown in a message.
BINS_SHOWN = 8


@dataclass(frozen=True)
class Localisation:
    """Where an error lives: ``kind`` (``bins``, ``residue``, ``half``, ``phase-ramp``, ``spread``), the ``bins`` it
    is concentrated in (natural order; empty unless ``bins``), the estimated ``shift_samples``
    (``phase-ramp`` only), the radix-2 ``stage`` (1 = the first, log2 N = the last; None
    when not found) and the plain ``words``."""

    kind: str
    words: str
    bins: tuple[int, ...] = ()
    shift_samples: float | None = None
    stage: int | None = None

    @property
    def structured(self) -> bool:
        """Whether the error has a structure that points at code (not ``spread``)."""
        return self.kind != "spread"


def error_energy(err: np.ndarray) -> tuple[np.ndarray, float] | None:
    """Return the per-bin energy |err|^2 and its finite, positive total, or None when there is
    no error to localise (zero, NaN or Inf)."""
    energy = np.abs(err) ** 2
    total = float(np.sum(energy))
    return (energy, total) if total > 0 and np.isfinite(total) else None


def concentrated_bins(err: np.ndarray, n: int | None = None) -> tuple[int, ...] | None:
    """Return the bins (sorted) holding :data:`CONCENTRATED_SHARE` of the energy of ``err``
    when they are few (see the module docstring), else None. For the transform size ``n``
    (even, given) the pair N/2 - 1, N - 1 of the last radix-2 butterfly counts as few at
    every size (at n = 4 it is half the bins)."""
    found = error_energy(err)
    if found is None:
        return None
    energy, total = found
    length = err.shape[0]
    order = np.argsort(-energy, kind="stable")
    cumulative = np.cumsum(energy[order]) / total
    count = int(np.searchsorted(cumulative, CONCENTRATED_SHARE) + 1)
    top = tuple(sorted(int(k) for k in order[:count]))
    if n is not None and n >= 4 and n % 2 == 0 and length == n and top == (n // 2 - 1, n - 1):
        return top
    if count > FEW_BINS or count > FEW_BINS_FRACTION * length:
        return None
    return top


def _shown(bins: tuple[int, ...] | list[int]) -> str:
    listed = ", ".join(map(str, bins[:BINS_SHOWN]))
    return listed + (", ..." if len(bins) > BINS_SHOWN else "")


def stage_of(bins: tuple[int, ...], n: int) -> tuple[int, int, int] | None:
    """Return ``(stage, span, j)`` for bins of a power-of-two ``n`` that all share one residue
    ``j`` modulo a power of two ``span`` < n (the largest such): the radix-2 DIT stage
    ``log2(2 span)`` that merges sub-transforms of size ``span``, with twiddle W_(2 span)^j.
    None for one bin, or when the bins share no residue modulo 2."""
    if len(bins) < 2 or not is_power_of_two(n):
        return None
    common = reduce(gcd, (b - bins[0] for b in bins[1:]))
    if common == 0:
        return None
    span = min(common & -common, n // 2)  # the largest power of two dividing every difference
    if span < 2:
        return None  # a residue modulo 1 says nothing
    stage = int(span).bit_length()  # log2(2 span)
    return stage, span, bins[0] % span


def _bins_words(bins: tuple[int, ...], case: Case, length: int) -> tuple[str, int | None]:
    """Return the account of an error concentrated in ``bins`` and the stage it points at."""
    n = case.n
    count = len(bins)
    head = (f"the error is concentrated in {count} of {length} output bins (k = {_shown(bins)}; "
            f"{CONCENTRATED_SHARE:.0%} of its energy), the other bins are right")
    notes = []
    if bins == (0,):
        notes.append("only the DC bin: the first (or last) term of a sum, for example the chirp filter's "
                     "wrap-around value of a Bluestein convolution, or the DC butterfly, is dropped")
    elif n % 2 == 0 and set(bins) <= {0, n // 2}:
        notes.append("DC and Nyquist: the special case of k = 0 and k = N/2 (a real transform's packing)")
    stage = None
    if n >= 4 and n % 2 == 0 and bins == (n // 2 - 1, n - 1):
        notes.append("k = N/2 - 1 and N - 1 share the last butterfly of the final radix-2 stage, twiddle "
                     "W_N^(N/2-1): the twiddle index of the last stage runs one past the table (or the table is "
                     "one short)")
        stage = int(n).bit_length() - 1
    elif is_power_of_two(n) and case.kind in ("fft", "ifft"):
        found = stage_of(bins, n)
        if found is not None:
            stage, span, j = found
            full = count == n // span
            perm = bit_reversal_permutation(n)
            inverse = np.argsort(perm)
            rev = sorted(int(inverse[b]) for b in bins)
            block = f"bit-reversed positions {rev[0]}..{rev[-1]}" if full else f"bit-reversed positions {_shown(rev)}"
            which = "every bin" if full else f"{count} of the {n // span} bins"
            notes.append(f"{which} k = {j} (mod {span}) ({block}): butterfly j = {j} of radix-2 stage {stage} of "
                         f"{int(n).bit_length() - 1} (decimation in time: the stage merging sub-transforms of size "
                         f"{span} into {2 * span}, twiddle W_{2 * span}^{j})")
    if not notes and count > 1:
        rev_pairs = [b for b in bins if (n - b) % n in bins and b != (n - b) % n]
        if rev_pairs:
            notes.append("the bins come in pairs k, N - k (a Hermitian pair: the real-input or conjugate-pair split)")
    return head + ("; " + "; ".join(notes) if notes else ""), stage


def _ramp_fit(truth: np.ndarray, y: np.ndarray, k: np.ndarray, n: int) -> tuple[float, float]:
    """Return ``(d, residual)``: the delay ``d`` (samples) whose phase ramp
    exp(-2j pi k d / n) best maps ``truth`` onto ``y`` (with a fitted constant), and the
    relative residual of that fit."""
    weight = np.abs(truth) * np.abs(y)
    r = y * np.conj(truth)
    if k.shape[0] < 3:
        return 0.0, float("inf")
    # the step between neighbouring bins (k increasing by one) carries -2 pi d / n
    steps = r[1:] * np.conj(r[:-1]) / np.maximum(weight[1:] * weight[:-1], 1e-300) ** 0.5
    steps = steps[np.diff(k) == 1]
    if steps.size == 0 or not np.any(np.abs(steps) > 0):
        return 0.0, float("inf")
    d = -float(np.angle(np.sum(steps))) * n / (2 * np.pi)
    cand = truth * np.exp(-2j * np.pi * k * d / n)
    cc = np.vdot(cand, cand).real
    if not cc > 0:
        return d, float("inf")
    a = np.vdot(cand, y) / cc
    residual = float(np.linalg.norm(y - a * cand) / max(np.linalg.norm(a * cand), 1e-300))
    if abs(abs(a) - 1) > 1e-3:
        return d, float("inf")  # a scale as well: not a pure delay
    return d, residual


def phase_ramp(case: Case, truth: np.ndarray, y: np.ndarray) -> float | None:
    """Return the delay d (samples, possibly fractional, in (-N/2, N/2]) when ``y`` equals
    ``truth`` times exp(-2j pi k d / N) up to a unit constant, for bins k numbered 0..N-1 or
    with the upper half negative (k - N), else None (forward kinds only: fft, rfft) (and None for a delay of less than 1e-3
    samples: that is no ramp)."""
    n, length = case.n, truth.shape[0]
    if length < 4 or case.kind not in ("fft", "rfft"):
        return None
    base = float(np.linalg.norm(y - truth) / max(np.linalg.norm(truth), 1e-300))
    natural = np.arange(length)
    signed = np.where(natural > n // 2, natural - n, natural) if case.kind in ("fft", "ifft") else natural
    best = None
    for k in (natural, signed):
        order = np.argsort(k, kind="stable")
        d, residual = _ramp_fit(truth[order], y[order], k[order], n)
        if residual <= RAMP_MATCH_RELATIVE and residual * 4 < base and (best is None or residual < best[1]):
            best = (d, residual)
    if best is None or abs(best[0]) < 1e-3:
        return None
    return best[0]


def residue_class(case: Case, err: np.ndarray) -> tuple[str, int] | None:
    """Return ``(words, stage)`` when an fft/ifft error of a power-of-two N lives in one class
    of bins k = j (mod P), P = 2^s < N (:data:`CONCENTRATED_SHARE` of its energy; the largest
    such P), else None.

    In bit-reversed order the class is one aligned block of N/P positions: the outputs of one
    sub-transform of size N/P of a decimation-in-frequency FFT, whose input the first s
    stages computed (a wrong twiddle of stage s, the last one before that sub-transform); in
    decimation in time it is butterfly j of the stage merging sub-transforms of size P.
    """
    n = case.n
    if case.kind not in ("fft", "ifft") or not is_power_of_two(n) or n < 4:
        return None
    found = error_energy(err)
    if found is None:
        return None
    energy, total = found
    k = np.arange(n)
    best = None
    p = 2
    while p < n:
        per_class = np.bincount(k % p, weights=energy, minlength=p)
        j = int(np.argmax(per_class))
        if per_class[j] >= CONCENTRATED_SHARE * total:
            best = (p, j)
        p *= 2
    if best is None:
        return None
    p, j = best
    s = int(p).bit_length() - 1
    perm = bit_reversal_permutation(n)
    first = int(np.argsort(perm)[j])  # the bit-reversed position of bin j starts the block
    words = (f"the error lives in the {n // p} bins k = {j} (mod {p}) only, the others are right; in bit-reversed "
             f"order that is the block {first}..{first + n // p - 1}: in decimation in frequency the sub-transform of "
             f"size {n // p} after stage {s} (a wrong twiddle of stage {s}), in decimation in time butterfly j = {j} "
             f"of the stage merging sub-transforms of size {p} (stage {s + 1})")
    return words, s


def upper_half(case: Case, err: np.ndarray) -> str | None:
    """Return the account of an fft/ifft error that lives in one half of the spectrum only
    (:data:`CONCENTRATED_SHARE` of its energy in k > N/2, or in 0 < k < N/2), else None: the
    half a real-input path builds from the other by the symmetry X[N-k] = conj X[k]."""
    n = case.n
    if case.kind not in ("fft", "ifft") or n < 8:
        return None
    found = error_energy(err)
    if found is None:
        return None
    energy, total = found
    k = np.arange(n)
    for name, mask in (("upper", k > n // 2), ("lower", (k > 0) & (k < (n + 1) // 2))):
        if float(np.sum(energy[mask])) >= CONCENTRATED_SHARE * total:
            other = "0 < k < N/2" if name == "upper" else "k > N/2"
            return (f"the error lives in the {name} half of the spectrum only ({name} bins wrong, {other} right): "
                    f"the half a real-input path builds from the other by X[N-k] = conj X[k] (a missing "
                    f"conjugate or an index off by one there)")
    return None


def localise_error(case: Case, truth: np.ndarray, y: np.ndarray) -> Localisation:
    """Return where the error ``y - truth`` lives (``truth`` the exact transform, both complex
    arrays of the output length; see the module docstring for the kinds).

    Never raises for arrays of the right length; ``y`` with NaN/Inf gives ``spread``.
    """
    truth = np.asarray(truth, dtype=np.complex128)
    y = np.asarray(y, dtype=np.complex128)
    length = truth.shape[0]
    if not np.all(np.isfinite(y)):
        return Localisation("spread", "the output is not finite")
    err = y - truth
    bins = concentrated_bins(err, case.n if case.kind in ("fft", "ifft") else None)
    if bins is not None:
        words, stage = _bins_words(bins, case, length)
        return Localisation("bins", words, bins=bins, stage=stage)
    found = residue_class(case, err)
    if found is not None:
        words, stage = found
        return Localisation("residue", words, stage=stage)
    half = upper_half(case, err)
    if half is not None:
        return Localisation("half", half)
    d = phase_ramp(case, truth, y)
    if d is not None:
        sign = "delayed" if d > 0 else "advanced"
        what = "half a sample" if abs(abs(d) - 0.5) < 0.01 else f"{abs(d):.4g} samples"
        where = "the output is the transform of the input"
        return Localisation("phase-ramp", (
            f"every bin is off by a phase growing linearly with k: {where} {sign} by {what} (estimated d = {d:.4g}; "
            f"a shift of d samples multiplies X[k] by exp(-2j pi k d / N)): a fractional time shift, for example "
            f"a half-sample offset in the twiddles or the input index"), shift_samples=d)
    share = float(np.max(np.abs(err) ** 2) / max(np.sum(np.abs(err) ** 2), 1e-300))
    return Localisation("spread", f"the error is spread over the output bins (the largest bin holds {share:.1%} of "
                                  f"its energy) with no bin or phase structure found")
