"""Test inputs: seeded random arrays for a case, and structured signals with known transforms.

Every random input is drawn from a generator that depends only on the run's seed and the
case (kind, precision, length, normalisation) plus a purpose string, never on the backend, so
every backend of a run sees exactly the same inputs and a run is reproducible from its seed.

The structured signals (impulse, tone, chirp, ...) are computed accurately: every angle is
``2 pi m / N`` with the integer ``m`` reduced modulo ``N`` first, and the root of unity is
evaluated after an exact reduction to the first octant (:func:`root_of_unity`).
"""

from __future__ import annotations

import functools
import hashlib
import math

import numpy as np

from fftgauge.harness.cases import FIXED_DTYPES, Case
from fftgauge.harness.dft import LONGDOUBLE_IS_WIDER
from fftgauge.harness.errors import UsageError

DISTRIBUTIONS = ("gaussian", "uniform")

#: Long double inputs get a small second draw scaled by this, so that their significands use
#: the bits beyond double's 53 (a value that is exactly a double would hide a backend that
#: computes in double).
_LONGDOUBLE_TAIL_SCALE = 2.0**-40


@functools.lru_cache(maxsize=256)
def _stable_hash(text: str) -> int:
    """Return a 64-bit integer digest of ``text`` that is the same in every process and on every machine."""
    return int.from_bytes(hashlib.blake2b(text.encode("utf-8"), digest_size=8).digest(), "little")


def case_rng(seed: int, case: Case, purpose: str = "") -> np.random.Generator:
    """Return a generator determined by (seed, kind, dtype, n, norm, purpose) alone.

    The entropy is ``np.random.SeedSequence([seed, hash(kind), hash(dtype), n, hash(norm),
    hash(purpose)])`` with a BLAKE2b digest for the strings (Python's ``hash()`` is salted per
    process), so the same seed gives the same inputs to every backend, in every process.

    Raises
    ------
    UsageError
        When ``seed`` is not a non-negative integer.
    """
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise UsageError(f"the seed must be a non-negative integer, got {seed!r}")
    entropy = [int(seed), _stable_hash(case.kind), _stable_hash(case.dtype), int(case.n),
               _stable_hash(case.norm), _stable_hash(purpose)]
    return np.random.Generator(np.random.PCG64(np.random.SeedSequence(entropy)))


def _draw(rng: np.random.Generator, size: int, distribution: str) -> np.ndarray:
    if distribution == "gaussian":
        return rng.standard_normal(size)
    return rng.uniform(-1.0, 1.0, size)


def _draw_real(rng: np.random.Generator, size: int, distribution: str, dtype: np.dtype) -> np.ndarray:
    """Return ``size`` draws rounded to ``dtype``; long double draws carry bits beyond double's."""
    v = _draw(rng, size, distribution)
    if dtype == np.longdouble and LONGDOUBLE_IS_WIDER:
        tail = _draw(rng, size, distribution) * _LONGDOUBLE_TAIL_SCALE
        out = v.astype(np.longdouble) + tail.astype(np.longdouble)
        if distribution == "uniform":
            out = np.clip(out, -1.0, np.nextafter(np.longdouble(1.0), np.longdouble(0.0)))
        return out
    return v.astype(dtype)


def random_input(case: Case, rng: np.random.Generator, distribution: str = "gaussian") -> np.ndarray:
    """Return a random input for ``case``: length ``case.input_length``, dtype ``case.input_dtype``.

    Parameters
    ----------
    case : the transform.
    rng : the generator (normally :func:`case_rng`).
    distribution : ``"gaussian"`` (standard normal; complex values have independent real and
        imaginary parts) or ``"uniform"`` (in [-1, 1)).

    Returns
    -------
    numpy.ndarray
        Values already rounded to the case's precision. For ``irfft`` a valid Hermitian half
        spectrum: ``imag(X[0]) = 0`` and, for even ``n``, ``imag(X[n/2]) = 0``.

    Raises
    ------
    UsageError
        For an unknown distribution.
    """
    if distribution not in DISTRIBUTIONS:
        raise UsageError(f"unknown input distribution {distribution!r}; expected one of {', '.join(DISTRIBUTIONS)}")
    length = case.input_length
    real = case.real_dtype
    if case.dtype in FIXED_DTYPES:  # q15/q31: (n, 2) integer pairs (harness/fixed/formats.py)
        from fftgauge.harness.fixed.signals import random_pairs
        return random_pairs(rng, length, case.dtype, real=case.kind == "rfft")
    if case.kind == "rfft":
        return _draw_real(rng, length, distribution, real)
    x = np.empty(length, dtype=case.complex_dtype)
    x.real = _draw_real(rng, length, distribution, real)
    x.imag = _draw_real(rng, length, distribution, real)
    if case.kind == "irfft":
        x[0] = x[0].real
        if case.n % 2 == 0:
            x[case.n // 2] = x[case.n // 2].real
    return x


# -- structured signals --------------------------------------------------------------------

_PI_WIDE = np.arctan(np.longdouble(1)) * 4  # pi in long double (double where long double is double)


def root_of_unity(m, n: int) -> np.ndarray:
    """Return ``exp(2j pi m / n)`` as complex128 for integer(s) ``m`` (any sign) and ``n >= 1``.

    Looks the values up in :func:`_unity_table` (``m`` reduced modulo ``n`` exactly), which
    the battery reuses across checks and backends of one size.
    """
    table = _unity_table(int(n))
    return table[np.mod(np.asarray(m, dtype=np.int64), n)]


@functools.lru_cache(maxsize=16)
def _unity_table(n: int) -> np.ndarray:
    """Return the read-only table ``exp(2j pi k / n)``, k = 0 .. n-1 (see :func:`_root_of_unity`)."""
    table = _root_of_unity(np.arange(n, dtype=np.int64), n)
    table.flags.writeable = False
    return table


def _root_of_unity(m, n: int) -> np.ndarray:
    """Return ``exp(2j pi m / n)`` as complex128 for integer(s) ``m`` (any sign) and ``n >= 1``.

    ``m`` is reduced modulo ``n`` exactly; the angle is then reduced exactly to [0, pi/4]
    with the symmetries of the quadrant and of the octant (integer arithmetic on ``4 m``), so
    the only rounding is that of an angle below pi/4, evaluated in long double where it is
    wider and rounded once to double. Exact values come out where they should: 1, j, -1,
    -j at the quarter turns. Integers up to 2^61 / 4 are handled exactly.
    """
    m = np.mod(np.asarray(m, dtype=np.int64), n)
    four_m = 4 * m
    quadrant = four_m // n
    r = four_m - quadrant * n           # angle within the quadrant = (pi/2) r / n, 0 <= r < n
    flip = 2 * r > n                    # past the octant: use the complement (pi/2)(n - r)/n
    s = np.where(flip, n - r, r)
    phi = (_PI_WIDE / 2) * (s.astype(np.longdouble) / np.longdouble(n))
    c, sn = np.cos(phi), np.sin(phi)
    cos_q = np.where(flip, sn, c).astype(np.float64)
    sin_q = np.where(flip, c, sn).astype(np.float64)
    re = np.select([quadrant == 0, quadrant == 1, quadrant == 2], [cos_q, -sin_q, -cos_q], sin_q)
    im = np.select([quadrant == 0, quadrant == 1, quadrant == 2], [sin_q, cos_q, -sin_q], -cos_q)
    return (re + 1j * im).astype(np.complex128)


def impulse(n: int, m: int = 0) -> np.ndarray:
    """Return the unit impulse delta[k - m] of length ``n`` (float64), ``m`` taken modulo ``n``."""
    x = np.zeros(n)
    x[m % n] = 1.0
    return x


def constant(n: int) -> np.ndarray:
    """Return the all-ones signal of length ``n`` (float64)."""
    return np.ones(n)


def complex_tone(n: int, k0: int) -> np.ndarray:
    """Return exp(2j pi k0 j / n), j = 0..n-1 (complex128), with ``k0 j`` reduced modulo ``n``."""
    j = np.arange(n, dtype=np.int64)
    return root_of_unity(((k0 % n) * j) % n, n)


def cosine(n: int, k0: int) -> np.ndarray:
    """Return cos(2 pi k0 j / n), j = 0..n-1 (float64), with ``k0 j`` reduced modulo ``n``."""
    return complex_tone(n, k0).real.copy()


def rect(n: int, length: int) -> np.ndarray:
    """Return the rectangular pulse: 1 for j < ``length``, 0 after (float64, ``0 <= length <= n``).

    Raises
    ------
    ValueError
        When ``length`` is outside [0, n].
    """
    if not 0 <= length <= n:
        raise ValueError(f"pulse length must be in [0, {n}], got {length}")
    x = np.zeros(n)
    x[:length] = 1.0
    return x


def integer_powers(a: complex | float, n: int) -> np.ndarray:
    """Return ``a**j`` for j = 0..n-1 (float64 for real ``a``, complex128 for complex ``a``).

    Binary powering carried in long double (where it is wider than double) and rounded once:
    ``a**j`` is the product of the squarings ``a**(2**b)`` for the bits b of j. Squaring
    doubles a relative error, so the error of ``a**j`` grows like ``j`` units of the working
    precision: about 2^-64 j on x86-64, i.e. still within one unit of double's 2^-53 up to
    j ~ 2^11 and a few units at 2^14. The geometric pair uses ``|a| = 0.9``, whose terms beyond
    j ~ 350 are below 2^-53 of the first, so the signal's normwise error stays at the double
    rounding level for every n.
    """
    is_complex = isinstance(a, complex) or np.iscomplexobj(a)
    wide = np.clongdouble if is_complex else np.longdouble
    j = np.arange(n, dtype=np.int64)
    out = np.ones(n, dtype=wide)
    power = np.asarray(a, dtype=wide)
    bit = 0
    while (1 << bit) < max(n, 1):
        mask = (j >> bit) & 1 == 1
        out[mask] *= power
        power = power * power
        bit += 1
    return out.astype(np.complex128 if is_complex else np.float64)


def geometric(n: int, a: complex | float) -> np.ndarray:
    """Return the geometric sequence ``a**j``, j = 0..n-1 (float64 for real ``a``, else complex128)."""
    return integer_powers(a, n)


def zadoff_chu(n: int, u: int) -> np.ndarray:
    """Return the Zadoff-Chu sequence exp(-j pi u j (j + 1) / n), j = 0..n-1 (complex128).

    The definition of 3GPP TS 36.211, section 5.7.2, for odd ``n``; ``j (j + 1)`` is even, so
    the angle is ``2 pi (u j (j + 1) / 2 mod n) / n`` with exact integer reduction.

    Raises
    ------
    ValueError
        When ``n`` is even (the sequence is defined for odd lengths) or ``u`` is not in (0, n).
    """
    if n % 2 == 0:
        raise ValueError(f"Zadoff-Chu sequences have odd length, got n = {n}")
    if not 0 < u < n:
        raise ValueError(f"the Zadoff-Chu root must be in (0, {n}), got u = {u}")
    j = np.arange(n, dtype=np.int64)
    half = (j * (j + 1) // 2) % n
    return root_of_unity(-((u * half) % n), n)


def chirp(n: int) -> np.ndarray:
    """Return the chirp exp(2j pi j^2 / n), j = 0..n-1 (complex128), with ``j^2`` reduced modulo ``n``."""
    j = np.arange(n, dtype=np.int64)
    return root_of_unity((j * j) % n, n)


def periodic_gaussian(n: int) -> np.ndarray:
    """Return the periodised Gaussian g[j] = sum_m exp(-pi (j + m n)^2 / n), j = 0..n-1 (float64).

    The sum runs over every m whose term is above the smallest double: |j + m n| up to
    sqrt(750 n / pi), with the integer ``(j + m n)^2`` formed exactly and the exponential
    taken in long double where it is wider, then rounded once.
    """
    j = np.arange(n, dtype=np.int64)
    reach = math.isqrt(int(750 * n / math.pi) + 1) + 1
    m_max = reach // n + 2
    g = np.zeros(n, dtype=np.longdouble)
    for m in range(-m_max, m_max + 1):
        d = j + m * n
        keep = np.abs(d) <= reach
        sq = (d[keep] * d[keep]).astype(np.longdouble)
        g[keep] += np.exp(-_PI_WIDE * sq / np.longdouble(n))
    return g.astype(np.float64)
