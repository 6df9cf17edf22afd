"""Operation-count models of the DFT and the FFT, the tally instrumented backends keep, and
the table ``fftgauge count`` prints.

Each model formula lives in exactly one function here, with its source in the docstring:
the direct DFT (:func:`direct_complex_mults`: N^2), radix-2 (:func:`radix2_complex_mults`:
(N/2) log2 N), split radix, the conventional flop count (:func:`pseudo_flops`: 5 N log2 N
complex, 2.5 N log2 N real; :func:`shaped_pseudo_flops` for a batch or an N-D transform) and the
rates built on them (:func:`gflops`,
:func:`ns_per_nlogn`, :func:`nlogn`).
"Complex multiplication" and "complex addition" are counted as the trade counts them: a
subtraction is an addition, and a multiplication by a twiddle factor counts whatever its
value unless a function says otherwise. Real equivalents use the schoolbook complex product
(4 real multiplications and 2 real additions) and 2 real additions per complex addition
(:func:`real_equivalents`).

This module imports no FFT library; :func:`count_table` loads the instrumented reference
backends through :func:`fftgauge.backends.registry.load_backend`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Iterable, Mapping

from fftgauge.harness.cases import Case, is_power_of_two

#: Largest size at which :func:`count_table` runs the instrumented direct DFT by default:
#: it is a pure-Python double loop (n**2 iterations; 2**10 takes about a second).
DIRECT_COUNT_MAX_N = 2**10

#: The backends :func:`count_table` counts with when none are given (role -> SPEC).
DEFAULT_COUNTING_SPECS = {"radix2": "radix2-dit", "direct": "direct"}


def _log2(n: int) -> int:
    """Return log2(n) for a power of two ``n``; raise ValueError otherwise."""
    if not is_power_of_two(n):
        raise ValueError(f"the radix-2 model needs a power of two, got n = {n}")
    return n.bit_length() - 1


def direct_complex_mults(n: int) -> int:
    """Return the complex multiplications of the direct DFT of length ``n``: ``n**2``.

    Source: common practice (textbook derivation): each of the n outputs
    X[k] = sum_m x[m] W^(km) takes n products x[m] W^(km).
    """
    return n * n


def direct_complex_adds(n: int) -> int:
    """Return the complex additions of the direct DFT of length ``n``: ``n * (n - 1)``.

    Source: common practice (textbook derivation): each output sums n products with
    n - 1 additions. N = 4 gives 12, N = 16 gives 240.
    """
    return n * (n - 1)


def radix2_complex_mults(n: int) -> int:
    """Return the complex multiplications of the radix-2 FFT of length ``n = 2**t``: ``(n/2) t``.

    Every one of the t stages has n/2 butterflies with one twiddle multiplication each;
    trivial twiddles (W^0 = 1, -1, -j) are counted like any other.

    Source: Cooley & Tukey, "An algorithm for the machine calculation of complex Fourier
    series", Math. Comp. 19 (1965) 297-301; common practice.

    Raises
    ------
    ValueError
        When ``n`` is not a power of two.
    """
    return (n // 2) * _log2(n)


def radix2_complex_adds(n: int) -> int:
    """Return the complex additions of the radix-2 FFT of length ``n = 2**t``: ``n t``.

    Every butterfly does one addition and one subtraction; there are (n/2) t butterflies.

    Source: Cooley & Tukey, Math. Comp. 19 (1965) 297-301; common practice.

    Raises
    ------
    ValueError
        When ``n`` is not a power of two.
    """
    return n * _log2(n)


def radix2_unit_twiddle_butterflies(n: int) -> int:
    """Return how many radix-2 butterflies of length ``n = 2**t`` have the twiddle W^0 = 1: ``n - 1``.

    Derivation (ours, from the loop structure): the stage whose butterflies span 2^s
    points has n / 2^s groups, each with exactly one butterfly of twiddle W^0; summed over
    s = 1..t this is n/2 + n/4 + ... + 1 = n - 1. The radix-2 multiplication count with the
    W^0 multiplications skipped is :func:`radix2_complex_mults` minus this. Verified
    against an independent enumeration in the tests, not taken on trust.

    Raises
    ------
    ValueError
        When ``n`` is not a power of two.
    """
    _log2(n)
    return n - 1


def pseudo_flops(n: int, real_input: bool) -> float:
    """Return the conventional real-operation count of an FFT of length ``n``.

    ``5 n log2 n`` for a complex transform, ``2.5 n log2 n`` for a real-input (or
    real-output) one, whatever algorithm actually runs; it turns a time into GFLOP/s.
    ``log2`` is taken as a real number for sizes that are not powers of two; n = 1 gives 0.

    Source: common practice in FFT benchmarking.
    """
    if n <= 1:
        return 0.0
    factor = 2.5 if real_input else 5.0
    return factor * n * math.log2(n)


def shaped_pseudo_flops(points: int, batch: int, real_input: bool) -> float:
    """Return the conventional real-operation count of one call of a batched or N-D transform.

    ``batch * 5 N log2 N`` (``2.5 N log2 N`` for the real kinds) with N the product of the
    transformed lengths (the points of one transform) and ``batch`` the transforms one call
    computes: :func:`pseudo_flops` of N, ``batch`` times. For an N-D transform done axis by
    axis, 5 N log2 N is exactly the sum of the 1-D counts over the axes
    (N log2 N = sum over axes a of (N / n_a) n_a log2 n_a), so one convention serves both.

    Source: common practice in FFT benchmarking (the usual FFT flop convention, applied per
    transform).
    """
    return batch * pseudo_flops(points, real_input)


def nlogn(n: int) -> float:
    """Return ``n * log2(n)``, the FFT's work scale (0 for n = 1; ``log2`` real for other sizes).

    Source: common practice; the radix-2 FFT does N log2 N complex additions (Cooley &
    Tukey, Math. Comp. 19 (1965) 297-301), so an FFT's time grows like it.
    """
    return n * math.log2(n) if n > 1 else 0.0


def ns_per_nlogn(seconds: float, n: int) -> float | None:
    """Return ``seconds * 1e9 / (n log2 n)``, the time per unit of FFT work; ``None`` for n = 1.

    Source: common practice: N log2 N is the FFT's asymptotic cost (:func:`nlogn`), so this
    stays flat as n grows when a backend scales as it should.
    """
    if n <= 1:
        return None
    return seconds * 1e9 / nlogn(n)


def gflops(flops: float, seconds: float) -> float:
    """Return ``flops / seconds / 1e9`` (GFLOP/s); 0.0 when ``seconds`` is not positive.

    Source: the definition of the unit (10^9 floating-point operations per second); with
    :func:`pseudo_flops` as ``flops`` it is the conventional FFT rate.
    """
    return flops / seconds / 1e9 if seconds > 0 else 0.0


def split_radix_real_ops(n: int) -> int:
    """Return the real operations (multiplications plus additions) of the split-radix FFT: ``4 n t - 6 n + 8``.

    For ``n = 2**t`` with t >= 1, trivial multiplications skipped.

    Source: Yavne 1968; Duhamel & Hollmann, Electronics Letters 20 (1984) 14-16 (from
    memory; the tests verify it against the split-radix recurrence).

    Raises
    ------
    ValueError
        When ``n`` is not a power of two of at least 2.
    """
    t = _log2(n)
    if t < 1:
        raise ValueError("the split-radix count is defined for n >= 2")
    return 4 * n * t - 6 * n + 8


def real_equivalents(complex_mults: int, complex_adds: int) -> tuple[int, int]:
    """Return ``(real_mults, real_adds)`` equivalent to complex operations.

    A complex product (a + jb)(c + jd) = (ac - bd) + j(ad + bc) takes 4 real multiplications
    and 2 real additions (the schoolbook product); a complex addition takes 2 real additions.
    Source: common practice.
    """
    return 4 * complex_mults, 2 * complex_mults + 2 * complex_adds


@dataclass
class OperationTally:
    """Counter an instrumented transform increments for each operation it performs.

    ``complex_mults``/``complex_adds`` are complex operations; ``extra_real_mults`` and
    ``extra_real_adds`` are real operations the algorithm does directly (scaling by a real
    factor: 2 real multiplications per complex value, 1 per real value).
    """

    complex_mults: int = 0
    complex_adds: int = 0
    extra_real_mults: int = 0
    extra_real_adds: int = 0

    def to_opcount(self, trivial_twiddles_counted: bool) -> "OpCount":
        """Return the tally as a :class:`fftgauge.backends.base.OpCount` with real equivalents added."""
        from fftgauge.backends.base import OpCount

        real_mults, real_adds = real_equivalents(self.complex_mults, self.complex_adds)
        return OpCount(
            complex_mults=self.complex_mults,
            complex_adds=self.complex_adds,
            real_mults=real_mults + self.extra_real_mults,
            real_adds=real_adds + self.extra_real_adds,
            trivial_twiddles_counted=trivial_twiddles_counted,
        )


def _counting_backends(counting_backends: Mapping[str, Any] | None) -> dict[str, Any]:
    """Return the role -> backend mapping, loading the default SPECs for missing roles."""
    from fftgauge.backends.registry import load_backend

    given = dict(counting_backends or {})
    return {role: given[role] if role in given else load_backend(spec)
            for role, spec in DEFAULT_COUNTING_SPECS.items()}


def _counted(backend: Any, n: int, count_trivial: bool, max_n: int | None) -> tuple[int | None, int | None]:
    """Return (complex mults, complex adds) of ``backend`` for a complex fft of length n, or Nones."""
    case = Case("fft", "float64", n)
    if backend is None or backend.unsupported_reason(case) is not None or (max_n is not None and n > max_n):
        return None, None
    count = backend.count_operations(case, count_trivial=count_trivial)
    return count.complex_mults, count.complex_adds


def count_table(sizes: Iterable[int], counting_backends: Mapping[str, Any] | None = None,
                count_trivial: bool = True, direct_max_n: int = DIRECT_COUNT_MAX_N) -> list[dict[str, Any]]:
    """Return one row per size: model counts, instrumented counts and the direct/FFT ratio.

    Parameters
    ----------
    sizes : transform lengths.
    counting_backends : mapping ``"radix2" -> backend`` and ``"direct" -> backend`` (either
        may be missing, then ``radix2-dit`` and ``direct`` are loaded; a role mapped to
        ``None`` is not counted).
    count_trivial : count the multiplications by the twiddle W^0 = 1 (True), or have the
        instrumented backends skip them (False). The model columns always count them.
    direct_max_n : the instrumented direct DFT runs only up to this size.

    Returns
    -------
    list of dict
        Keys: ``n``, ``direct_mults_model``, ``direct_adds_model``, ``radix2_mults_model``,
        ``radix2_adds_model`` (None when n is not a power of two), ``radix2_mults_counted``,
        ``radix2_adds_counted`` (None when the radix-2 backend does not take n: not a power
        of two or above its ``max_n``), ``direct_mults_counted``, ``direct_adds_counted``
        (None above ``direct_max_n`` or the direct backend's ``max_n``),
        ``direct_to_radix2_mults`` (model direct / model radix-2 multiplications; None when
        the radix-2 model is None or 0), ``pseudo_flops`` (complex transform) and
        ``split_radix_real_ops`` (None unless n is a power of two >= 2). Counts are for the
        complex ``fft`` kind.

    Raises
    ------
    UsageError
        When a default counting backend cannot be loaded.
    """
    backends = _counting_backends(counting_backends)
    rows = []
    for n in sizes:
        pow2 = is_power_of_two(n)
        r2_mults = radix2_complex_mults(n) if pow2 else None
        r2_mults_counted, r2_adds_counted = _counted(backends["radix2"], n, count_trivial, None)
        d_mults_counted, d_adds_counted = _counted(backends["direct"], n, count_trivial, direct_max_n)
        rows.append({
            "n": n,
            "direct_mults_model": direct_complex_mults(n),
            "direct_adds_model": direct_complex_adds(n),
            "radix2_mults_model": r2_mults,
            "radix2_adds_model": radix2_complex_adds(n) if pow2 else None,
            "radix2_mults_counted": r2_mults_counted,
            "radix2_adds_counted": r2_adds_counted,
            "direct_mults_counted": d_mults_counted,
            "direct_adds_counted": d_adds_counted,
            "direct_to_radix2_mults": direct_complex_mults(n) / r2_mults if r2_mults else None,
            "pseudo_flops": pseudo_flops(n, real_input=False),
            "split_radix_real_ops": split_radix_real_ops(n) if pow2 and n >= 2 else None,
        })
    return rows
