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

Below :data:`SMALL_N` bins, where "a few" cannot be a small fraction, a proper subset of wrong
bins whose other bins are right to the case's accuracy limit is ``bins`` too
(:func:`right_to_limit`). :func:`inverse_delay` finds the delay of an ifft/irfft output from its
forward transform. Every structured localisation carries a short ``where`` and ``likely`` (the
line of code in a typical implementation) besides its ``words``; :func:`located` puts the three
in one message and :func:`where_of` reads the short two back for the terminal summary.

It runs only on a failed output (in the worker, from :func:`~fftgauge.harness.battery.diagnosis.diagnose`),
where the output and the ground truth are both at hand.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import reduce
from math import gcd
from typing import Callable

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


#: Below this size "a few bins" cannot be a small fraction of them: there a proper subset of
#: wrong bins, the others right to the case's own accuracy limit, is localised too.
SMALL_N = 16
#: A bin that is right to the limit counts as evidence only when its exact value is at least
#: this fraction of the rms output (a zero bin computed as zero proves nothing).
RIGHT_BIN_SIGNIFICANT = 1e-3


@dataclass(frozen=True)
class Localisation:
    """Where an error lives: ``kind`` (``bins``, ``residue``, ``half``, ``phase-ramp``, ``spread``), the ``bins`` it
    is concentrated in (natural order; empty unless ``bins``), the estimated ``shift_samples``
    (``phase-ramp`` only), the radix-2 ``stage`` (1 = the first, log2 N = the last; None
    when not found), the plain ``words`` (the details), and the short ``where`` (which bins or
    stage) and ``likely`` (the line of code in a typical implementation) of the summary."""

    kind: str
    words: str
    bins: tuple[int, ...] = ()
    shift_samples: float | None = None
    stage: int | None = None
    where: str = ""
    likely: str = ""

    @property
    def structured(self) -> bool:
        """Whether the error has a structure that points at code (not ``spread``)."""
        return self.kind != "spread"

    def message(self) -> str:
        """Return :func:`located` of this localisation (``words`` alone when it has no ``where``)."""
        return located(self.where, self.likely, self.words) if self.where else self.words


#: The words a located message carries its short parts in (:func:`located`, :func:`where_of`).
WHERE_MARK, LIKELY_MARK, DETAIL_MARK = "where: ", "; likely code: ", ". Details: "


def located(where: str, likely: str, detail: str) -> str:
    """Return a message that says where an error lives, the likely line of code and the details:
    ``"where: <where>; likely code: <likely>. Details: <detail>"``; :func:`where_of` reads the
    two short parts back (the terminal summary shows them, the JSON keeps all)."""
    return f"{WHERE_MARK}{where}{LIKELY_MARK}{likely}{DETAIL_MARK}{detail}"


def where_of(message: str) -> tuple[str, str] | None:
    """Return ``(where, likely)`` of a message that holds a :func:`located` part, else None."""
    text = str(message or "")
    start = text.find(WHERE_MARK)
    mid = text.find(LIKELY_MARK, start + 1)
    end = text.find(DETAIL_MARK, mid + 1)
    if start < 0 or mid < 0 or end < 0:
        return None
    return text[start + len(WHERE_MARK):mid], text[mid + len(LIKELY_MARK):end]


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


def right_to_limit(err: np.ndarray, truth: np.ndarray, limit: float | None) -> tuple[int, ...] | None:
    """Return the wrong bins (sorted) of a small transform (length < :data:`SMALL_N`) whose
    other bins are right to the case's own accuracy ``limit`` (each within ``limit`` times the
    2-norm of the exact output), at least one of them a significant value
    (:data:`RIGHT_BIN_SIGNIFICANT` of the rms output); else None.

    Rounding in a lower precision touches every bin of a generic input; a wrong constant or
    twiddle reaches only the bins that use it."""
    length = err.shape[0]
    if limit is None or not 2 <= length < SMALL_N:
        return None
    scale = float(np.linalg.norm(truth))
    if not scale > 0 or not np.all(np.isfinite(err)):
        return None
    right = np.abs(err) <= limit * scale
    significant = right & (np.abs(truth) >= RIGHT_BIN_SIGNIFICANT * scale / np.sqrt(length))
    if right.all() or not significant.any():
        return None
    return tuple(int(k) for k in np.flatnonzero(~right))


def _bins_notes(bins: tuple[int, ...], case: Case, length: int, truth: np.ndarray,
                y: np.ndarray) -> tuple[list[str], str, str, int | None]:
    """Return ``(notes, where, likely, stage)`` for an error in ``bins``: what the bins have in
    common and the code that computes just those."""
    n = case.n
    count = len(bins)
    notes: list[str] = []
    where = f"{count} of {length} bins (k = {_shown(bins)})"
    likely, stage = "the code of those bins (no butterfly or stage they share found)", None
    if bins == (0,):
        notes.append("only the DC bin: the first (or last) term of a sum, for example the chirp filter's "
                     "wrap-around value of a Bluestein convolution, or the DC butterfly, is dropped")
        where = "bin k = 0 only"
        likely = "a loop bound one short (a Bluestein chirp's wrap-around)"
    elif n >= 4 and n % 2 == 0 and set(bins) <= {0, n // 2}:
        notes.append("DC and Nyquist: the special case of k = 0 and k = N/2 (a real transform's packing)")
        where = "DC and Nyquist bins only"
        likely = "the k = 0 and k = N/2 special case of a real transform's packing"
    elif case.kind == "rfft" and n % 2 == 1 and bins == (length - 1,):
        real = abs(y[-1] - truth[-1].real) <= 1e-3 * abs(truth[-1])
        notes.append(f"the last bin k = (N - 1)/2 of an odd N, which is no Nyquist bin"
                     f"{' (its imaginary part is dropped)' if real else ''}")
        where = f"last bin k = {length - 1} of odd N only"
        likely = "the odd-N branch treats the last bin as a Nyquist bin" + (" (keeps its real part)" if real else "")
    elif case.kind in ("fft", "ifft") and _butterfly_rows(bins, n) is not None:
        p = _butterfly_rows(bins, n)
        notes.append(f"every bin from N/{p} = {n // p} up, the first {n // p} right: rows 1..{p - 1} of a radix-{p} "
                     f"butterfly (row 0 is a plain sum of the legs)")
        where = f"bins k >= N/{p}: rows 1..{p - 1} of a radix-{p} butterfly"
        likely = f"a radix-{p} butterfly constant (cos, sin 2 pi/{p}) or a leg's root"
    elif length >= 2 and bins == tuple(range(1, length)):
        notes.append("every bin but DC: DC is the plain sum of the input, every other bin uses the twiddle or "
                     "butterfly constants")
        where = "every bin but DC (k = 0 right)"
        likely = "a twiddle or butterfly constant (DC, a plain sum, uses none)"
    if not notes and n >= 4 and n % 2 == 0 and bins == (n // 2 - 1, n - 1):
        notes.append("k = N/2 - 1 and N - 1 share the last butterfly of the final radix-2 stage, twiddle "
                     "W_N^(N/2-1): the twiddle index of the last stage runs one past the table (or the table is "
                     "one short)")
        stage = int(n).bit_length() - 1
        where = "bins N/2-1, N-1 (last stage's last butterfly)"
        likely = "the twiddle index of the last stage runs one past the table"
    elif not notes and is_power_of_two(n) and case.kind in ("fft", "ifft"):
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
            where = f"{which} k = {j} (mod {span}): radix-2 stage {stage} of {int(n).bit_length() - 1}"
            likely = f"butterfly j = {j} of stage {stage}: its twiddle W_{2 * span}^{j}"
    if not notes and count > 1:
        rev_pairs = [b for b in bins if (n - b) % n in bins and b != (n - b) % n]
        if rev_pairs:
            notes.append("the bins come in pairs k, N - k (a Hermitian pair: the real-input or conjugate-pair split)")
            likely = "the split computing X[k] and X[N-k] together (real input)"
    if case.kind in ("fft", "ifft") and n >= 3 and all(b > n // 2 for b in bins) and stage is None:
        where = f"upper half of the spectrum only (k = {_shown(bins)})"
        likely = "X[N-k] = conj X[k] in a real-input path (a missing conj, or off by one)"
    return notes, where, likely, stage


def _butterfly_rows(bins: tuple[int, ...], n: int) -> int | None:
    """Return the odd prime p (3, 5, 7) for which ``bins`` are every k from N/p up, else None."""
    for p in (3, 5, 7):
        if n % p == 0 and bins == tuple(range(n // p, n)):
            return p
    return None


def _bins_account(bins: tuple[int, ...], case: Case, truth: np.ndarray, y: np.ndarray,
                  small: bool = False) -> Localisation:
    """Return the ``bins`` localisation of an error in ``bins`` (``small``: found by
    :func:`right_to_limit`, the other bins right to the accuracy limit)."""
    length = truth.shape[0]
    notes, where, likely, stage = _bins_notes(bins, case, length, truth, y)
    if small:
        head = (f"the error is in {len(bins)} of {length} output bins (k = {_shown(bins)}), the other bins are right "
                f"to the accuracy limit (rounding in a lower precision would touch every bin)")
    else:
        head = (f"the error is concentrated in {len(bins)} of {length} output bins (k = {_shown(bins)}; "
                f"{CONCENTRATED_SHARE:.0%} of its energy), the other bins are right")
    words = head + ("; " + "; ".join(notes) if notes else "")
    return Localisation("bins", words, bins=bins, stage=stage, where=where, likely=likely)


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
    (fft, ifft) with the upper half negative (k - N), else None (and None for a delay of less
    than 1e-3 samples: that is no ramp). For ``ifft`` the index is the output's time t and
    the ramp of an inverse has the opposite sign: the d returned is that of
    exp(+2j pi t d / N). ``irfft`` (a real output) has no ramp here: see :func:`inverse_delay`.
    At least 3 values are needed."""
    n, length = case.n, truth.shape[0]
    if length < 3 or case.kind == "irfft":
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
    return -best[0] if case.kind == "ifft" else best[0]


def inverse_delay(case: Case, truth: np.ndarray, y: np.ndarray,
                  forward: Callable[[np.ndarray], np.ndarray]) -> Localisation | None:
    """Return the ``phase-ramp`` localisation of an ifft/irfft output that is the right one
    delayed by d samples: its forward transform (``forward``, of the same norm) is the exact
    one's times exp(-2j pi k d / N) (the DFT shift theorem). For an even-N irfft the Nyquist
    bin is left out (a real output cannot carry its ramp). Else None."""
    if case.kind not in ("ifft", "irfft"):
        return None
    fcase = Case("fft" if case.kind == "ifft" else "rfft", case.dtype, case.n, case.norm)
    ft, fy = forward(truth), forward(y)
    if case.kind == "irfft" and case.n % 2 == 0:
        ft, fy = ft[:-1], fy[:-1]
    d = phase_ramp(fcase, ft, fy)
    if d is None:
        return None
    return _ramp_account(d, "the output is the inverse transform delayed", "its forward transform is the exact "
                         "one's times exp(-2j pi k d / N)")


def _ramp_account(d: float, subject: str, theorem: str, unit: str = "sample") -> Localisation:
    """Return the ``phase-ramp`` localisation of a delay ``d`` (in ``unit``s: samples, or bins
    for the output ramp of an ifft); ``subject`` says what is ``delayed``."""
    sign = "delayed" if d > 0 else "advanced"
    what = f"half a {unit}" if abs(abs(d) - 0.5) < 0.01 else f"{abs(d):.4g} {unit}s"
    subject = subject.replace(" delayed", f" {sign}")
    words = (f"{subject} by {what} (estimated d = {d:.4g}; {theorem}): a fractional time shift, for example a "
             f"half-sample offset in the twiddles or the input index")
    return Localisation("phase-ramp", words, shift_samples=d,
                        where=f"every bin, a linear phase: {sign} by {what}",
                        likely="a half-sample offset in a twiddle exponent or the sample index")


def residue_class(case: Case, err: np.ndarray) -> Localisation | None:
    """Return the ``residue`` localisation when an fft/ifft error of a power-of-two N lives in
    one class of bins k = j (mod P), P = 2^s < N (:data:`CONCENTRATED_SHARE` of its energy;
    the largest such P), else None.

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
    return Localisation("residue", words, stage=s,
                        where=f"bins k = {j} (mod {p}), bit-reversed {first}..{first + n // p - 1}",
                        likely=f"a twiddle of stage {s} (decimation in frequency; in decimation in time butterfly "
                               f"j = {j} of stage {s + 1})")


def upper_half(case: Case, err: np.ndarray) -> Localisation | None:
    """Return the ``half`` localisation of an fft/ifft error that lives in one half of the
    spectrum only (:data:`CONCENTRATED_SHARE` of its energy in k > N/2, or in 0 < k < N/2),
    else None: the half a real-input path builds from the other by X[N-k] = conj X[k]."""
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
            words = (f"the error lives in the {name} half of the spectrum only ({name} bins wrong, {other} right): "
                     f"the half a real-input path builds from the other by X[N-k] = conj X[k] (a missing "
                     f"conjugate or an index off by one there)")
            return Localisation("half", words, where=f"{name} half of the spectrum only",
                                likely="X[N-k] = conj X[k] in a real-input path (a missing conj, or off by one)")
    return None


def localise_error(case: Case, truth: np.ndarray, y: np.ndarray, limit: float | None = None) -> Localisation:
    """Return where the error ``y - truth`` lives (``truth`` the exact transform, both complex
    arrays of the output length; see the module docstring for the kinds). ``limit`` (the
    case's relative accuracy limit) lets a small transform's proper subset of wrong bins count
    as ``bins`` (:func:`right_to_limit`).

    Never raises for arrays of the right length; ``y`` with NaN/Inf gives ``spread``.
    """
    truth = np.asarray(truth, dtype=np.complex128)
    y = np.asarray(y, dtype=np.complex128)
    if not np.all(np.isfinite(y)):
        return Localisation("spread", "the output is not finite")
    err = y - truth
    bins = concentrated_bins(err, case.n if case.kind in ("fft", "ifft") else None)
    if bins is not None:
        return _bins_account(bins, case, truth, y)
    for found in (residue_class(case, err), upper_half(case, err)):
        if found is not None:
            return found
    d = phase_ramp(case, truth, y)
    if d is not None:
        if case.kind == "ifft":
            return _ramp_account(d, "every output sample is off by a phase growing linearly with t: the output is the "
                                 "right one times exp(+2j pi t d / N), its spectrum delayed",
                                 "the inverse's ramp has the + sign", unit="bin")
        return _ramp_account(d, "every bin is off by a phase growing linearly with k: the output is the transform of "
                             "the input delayed", "a shift of d samples multiplies X[k] by exp(-2j pi k d / N)")
    small = right_to_limit(err, truth, limit)
    if small is not None:
        return _bins_account(small, case, truth, y, small=True)
    share = float(np.max(np.abs(err) ** 2) / max(np.sum(np.abs(err) ** 2), 1e-300))
    return Localisation("spread", f"the error is spread over the output bins (the largest bin holds {share:.1%} of "
                                  f"its energy) with no bin or phase structure found")
