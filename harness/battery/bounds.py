"""Error bounds: unit roundoff, Higham's FFT bound, and the limit of the ``accuracy`` check.

The ``accuracy`` check compares a backend's relative 2-norm error
``norm2(y - X) / norm2(X)`` (equal to the relative rms error) with :func:`accuracy_limit`.
The limit is Higham's worst-case bound for the radix-2 FFT, stretched for the algorithms that
correct libraries use at other sizes. It is a *worst-case* bound: typical errors of a correct
FFT with accurately computed twiddles grow only like ``eps * sqrt(log2 N)`` (Schatzman 1996),
so a correct transform stays one to two orders of magnitude below it, while a transform
computed in a lower precision (``float32`` arithmetic for a ``float64`` case: errors near
``1e-7`` against a limit near ``1e-14``) lands six or more orders of magnitude above it.
"""

from __future__ import annotations

import math

from fftgauge.harness.cases import Case
from fftgauge.harness.dft import is_power_of_two, machine_epsilon, unit_roundoff  # noqa: F401 - re-exported

#: Default twiddle error bound ``mu`` in units of the unit roundoff ``u``. A twiddle whose real
#: and imaginary parts are each correctly rounded has ``|w_hat - w| <= u |w| = u``; that is
#: what Higham's theorem calls accurately computed twiddles (mu = c u with a small c), and
#: mu = 1 u makes the float64 bound at N = 1024 equal 7.4e-15 (the figure in the contracts).
#: Libraries' twiddles are a few ulps at worst (pocketfft and FFTW build them from accurate
#: tables, never by a long recurrence); the slack between the worst-case bound and the
#: typical error covers that, as the tests measure on numpy, scipy and pyFFTW.
DEFAULT_TWIDDLE_ERROR_UNITS = 1.0

#: Effective stage count for lengths that are not powers of two, per ceil(log2 N) (+1): see
#: :func:`effective_stages`.
NON_POW2_STAGE_FACTOR = 4
#: Extra stages charged to the real kinds (rfft's post-processing, irfft's pre-processing).
REAL_KIND_EXTRA_STAGES = 2


def eps_units(rel_error: float, dtype: str) -> float:
    """Return ``rel_error`` in units of the precision's machine epsilon: ``rel_error / eps``.

    Raises
    ------
    ValueError
        For an unknown precision.
    """
    return rel_error / machine_epsilon(dtype)


def gamma(k: int, u: float) -> float:
    """Return Higham's gamma_k = k u / (1 - k u).

    Source: Higham, Accuracy and Stability of Numerical Algorithms, 2nd ed., SIAM 2002 (the
    constant of his rounding-error lemma, gamma_k bounds the error of k roundings).

    Raises
    ------
    ValueError
        When ``k u >= 1`` (the bound does not exist).
    """
    ku = k * u
    if ku >= 1.0:
        raise ValueError(f"gamma_{k} is undefined for u = {u!r} (k u >= 1)")
    return ku / (1.0 - ku)


def higham_bound(stages: float, u: float, mu: float) -> float:
    """Return Higham's FFT bound t eta / (1 - t eta), eta = mu + gamma_4 (sqrt(2) + mu), for t = ``stages``.

    Source: Higham, Accuracy and Stability of Numerical Algorithms, 2nd ed., SIAM 2002,
    Theorem 24.2 (from memory): for the radix-2 FFT of length N = 2^t with computed twiddles
    of absolute error at most ``mu``, norm2(y_hat - y) / norm2(y) <= t eta / (1 - t eta).
    This is the one place the formula lives; ``stages`` may be an effective stage count.

    Returns ``inf`` when ``t eta >= 1`` (the bound says nothing).
    """
    eta = mu + gamma(4, u) * (math.sqrt(2.0) + mu)
    t_eta = stages * eta
    if t_eta >= 1.0:
        return math.inf
    return t_eta / (1.0 - t_eta)


def default_twiddle_error(dtype: str) -> float:
    """Return the default twiddle error bound mu = ``DEFAULT_TWIDDLE_ERROR_UNITS`` * u.

    Raises
    ------
    ValueError
        For an unknown precision.
    """
    return DEFAULT_TWIDDLE_ERROR_UNITS * unit_roundoff(dtype)


def higham_radix2_bound(n: int, dtype: str, mu: float | None = None) -> float:
    """Return Higham's relative 2-norm error bound for a radix-2 FFT of length ``n = 2^t``.

    Parameters
    ----------
    n : a power of two (t = log2 n; ``n = 1`` gives t = 0 and the bound 0).
    dtype : the precision (its unit roundoff u).
    mu : twiddle error bound; default ``DEFAULT_TWIDDLE_ERROR_UNITS * u`` (accurate twiddles).

    Returns
    -------
    float
        ``t eta / (1 - t eta)`` with ``eta = mu + gamma_4 (sqrt(2) + mu)`` (:func:`higham_bound`),
        Higham 2002, Theorem 24.2 (from memory).

    Raises
    ------
    ValueError
        When ``n`` is not a power of two, or for an unknown precision.
    """
    if not is_power_of_two(int(n)):
        raise ValueError(f"the radix-2 bound needs a power of two, got n = {n}")
    u = unit_roundoff(dtype)
    return higham_bound(int(n).bit_length() - 1, u, default_twiddle_error(dtype) if mu is None else mu)


def effective_stages(case: Case) -> float:
    """Return the stage count t at which :func:`accuracy_limit` evaluates Higham's bound.

    - Powers of two: t = log2 N, at least 1 (N = 1 is the identity, but the scaling or a copy
      through another precision still rounds once).
    - Other lengths: t = ``NON_POW2_STAGE_FACTOR`` * (ceil(log2 N) + 1) = 4 (ceil(log2 N) + 1).
      Correct libraries reach such lengths by mixed radix (radix 3, 5, 7, ... butterflies),
      by Rader's algorithm for primes (a cyclic convolution of length N - 1 done with two or
      three FFTs; FFTW uses it), or by Bluestein's chirp-z algorithm (pocketfft in numpy and
      scipy uses it for large prime factors) - the worst case: a chirp multiplication, three
      FFTs of length
      M = 2^ceil(log2(2N - 1)) <= 4N, so log2 M <= ceil(log2 N) + 1 stages each (the chirp's
      own transform, precomputed, carries the same error as the other two), a pointwise
      product and a final chirp multiplication. That is 3 (ceil(log2 N) + 1) stages plus
      three products, each worth about one stage's eta; the fourth multiple of
      ceil(log2 N) + 1 covers those products (ceil(log2 N) + 1 >= 3 for N >= 3) and the
      growth of the relative error when only N of the convolution's M outputs are kept (a
      constant factor, as the unit-modulus chirps neither grow nor shrink the data). A
      mixed-radix stage of radix p costs about the log2 p radix-2 stages it replaces times a
      small factor (a hard-coded radix-p butterfly is a short direct sum), so the same count
      covers mixed radix. The tests measure numpy, scipy and pyFFTW at primes up to 10^4 and
      at smooth and odd sizes: they stay below a tenth of this limit for N >= 16.
    - Real kinds add ``REAL_KIND_EXTRA_STAGES`` = 2: rfft's post-processing (splitting the
      half-length complex transform's output: one twiddle product and one butterfly) and
      irfft's matching pre-processing.
    """
    n = case.n
    if is_power_of_two(n):
        stages = float(max(1, n.bit_length() - 1))
    else:
        stages = float(NON_POW2_STAGE_FACTOR * (math.ceil(math.log2(n)) + 1))
    if case.is_real:
        stages += REAL_KIND_EXTRA_STAGES
    return stages


def accuracy_limit(case: Case) -> float:
    """Return the relative 2-norm (= relative rms) error above which the ``accuracy`` check fails.

    The limit is :func:`higham_bound` at t = :func:`effective_stages` (``case``), with the
    default twiddle error (mu = u) of the case's precision; when the normalisation scales the
    result (factor other than 1: ``ortho``, ``backward`` inverse, ``forward`` forward) the
    scaling's rounding is added as ``(1 + bound)(1 + gamma_2) - 1`` (one rounding of the
    factor, one of the product). Sources: Higham 2002, Theorem 24.2 (from memory); the
    stretching for other sizes is justified in :func:`effective_stages`.

    Raises
    ------
    ValueError
        For a precision without a unit roundoff (cannot happen for a valid :class:`Case`).
    """
    u = unit_roundoff(case.dtype)
    bound = higham_bound(effective_stages(case), u, default_twiddle_error(case.dtype))
    if _scales(case):
        g2 = gamma(2, u)
        bound = bound + g2 + bound * g2  # (1 + bound)(1 + gamma_2) - 1, without cancellation
    return bound


def _scales(case: Case) -> bool:
    """Return True when the case's normalisation multiplies the result by a factor other than 1."""
    if case.n == 1:
        return False
    return case.norm == "ortho" or (case.norm == "backward") == case.is_inverse
