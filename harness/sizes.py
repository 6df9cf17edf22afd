"""The ``--sizes`` grammar and the named size sets.

Grammar (comma-separated items, see the contracts):

- ``N``            one size, a positive integer
- ``A..B``         every integer from A to B inclusive
- ``2^A..2^B``     powers of two from 2^A to 2^B (``2^A`` alone is one size)
- ``@name``        a named set, see :data:`NAMED_SETS`

Sizes come back sorted and without repeats. A bad item raises :class:`UsageError` naming it.
"""

from __future__ import annotations

import re

import numpy as np

from fftgauge.harness.errors import UsageError

#: Sizes above this are refused: a single complex128 array would need more than 16 GiB.
MAX_SIZE = 2**30

#: Seed of the few random sizes in ``@default``; fixed so that ``@default`` is one set of
#: sizes on every machine and in every run (the run's ``--seed`` drives the inputs).
DEFAULT_RANDOM_SIZES_SEED = 20261201


def _primes_below(limit: int) -> list[int]:
    """Return the primes below ``limit`` (sieve of Eratosthenes)."""
    sieve = np.ones(limit, dtype=bool)
    sieve[:2] = False
    for p in range(2, int(limit**0.5) + 1):
        if sieve[p]:
            sieve[p * p :: p] = False
    return [int(p) for p in np.flatnonzero(sieve)]


def is_prime(n: int) -> bool:
    """Return True when ``n`` is prime (trial division; fine for the sizes used here)."""
    if n < 2:
        return False
    if n % 2 == 0:
        return n == 2
    f = 3
    while f * f <= n:
        if n % f == 0:
            return False
        f += 2
    return True


def _smooth_sizes(limit: int) -> list[int]:
    """Return the 7-smooth numbers (2^a 3^b 5^c 7^d) up to ``limit`` that are not powers of two."""
    out = set()
    for a in range(0, 31):
        for b in range(0, 20):
            for c in range(0, 14):
                for d in range(0, 12):
                    v = 2**a * 3**b * 5**c * 7**d
                    if v > limit:
                        break
                    if b or c or d:
                        out.add(v)
    return sorted(out)


_POW2 = [2**k for k in range(0, 17)]
_PRIMES = [p for p in _primes_below(64)] + [67, 97, 101, 127, 251, 257, 509, 521, 1009, 2003, 4093, 8191, 9973]
# A spread of 3/5/7-smooth sizes (every smooth size up to 100, then a logarithmic sample).
_SMOOTH = [s for s in _smooth_sizes(100)] + [
    120, 125, 128 * 3, 210, 243, 343, 360, 480, 625, 729, 1000, 1200, 1536, 2187, 2401, 3125, 3600, 4800, 6561, 10000,
]
_ODD = [9, 15, 21, 25, 27, 33, 35, 39, 45, 49, 51, 55, 63, 65, 75, 77, 81, 85, 91, 99, 105, 121, 143, 169, 221, 225,
        243, 289, 323, 343, 625, 1001, 1331, 2025, 3003, 4095, 9999]
_DEEP_POW2 = [2**k for k in range(17, 21)]
_DEEP_PRIMES = [65521, 65537, 99991, 131071]


def _random_sizes() -> list[int]:
    rng = np.random.default_rng(DEFAULT_RANDOM_SIZES_SEED)
    return sorted(int(v) for v in rng.integers(65, 5000, size=6))


def _default() -> list[int]:
    return sorted(set(range(1, 65)) | set(_POW2) | set(_PRIMES) | set(_SMOOTH) | set(_ODD) | set(_random_sizes()))


NAMED_SETS = {
    "pow2": ("powers of two 2^0 .. 2^16", lambda: list(_POW2)),
    "primes": ("primes below 64, then 67 .. 9973 (the sizes where Bluestein or Rader paths run)", lambda: list(_PRIMES)),
    "smooth": ("3/5/7-smooth sizes that are not powers of two: all up to 100, then 120 .. 10000",
               lambda: sorted(set(_SMOOTH))),
    "odd": ("odd composite sizes 9 .. 9999", lambda: list(_ODD)),
    "default": ("every N from 1 to 64, @pow2, @primes, @smooth, @odd and six seeded random sizes in 65 .. 4999",
                _default),
    "deep": ("@default plus 2^17 .. 2^20 and the primes 65521, 65537, 99991, 131071",
             lambda: sorted(set(_default()) | set(_DEEP_POW2) | set(_DEEP_PRIMES))),
}

_INT = r"[0-9]+"
_RANGE = re.compile(rf"^({_INT})\.\.({_INT})$")
_POW_RANGE = re.compile(rf"^2\^({_INT})\.\.2\^({_INT})$")
_POW_ONE = re.compile(rf"^2\^({_INT})$")


def _check_size(n: int, item: str) -> int:
    if n < 1:
        raise UsageError(f"size item {item!r}: sizes must be positive integers")
    if n > MAX_SIZE:
        raise UsageError(f"size item {item!r}: sizes above 2^30 are not supported")
    return n


def _parse_item(item: str) -> list[int]:
    if item.startswith("@"):
        name = item[1:]
        if name not in NAMED_SETS:
            raise UsageError(f"unknown size set {item!r}; known sets: {', '.join('@' + k for k in NAMED_SETS)}")
        return NAMED_SETS[name][1]()
    if re.fullmatch(_INT, item):
        return [_check_size(int(item), item)]
    m = _POW_ONE.match(item)
    if m:
        return [_check_size(2 ** int(m.group(1)), item)]
    m = _POW_RANGE.match(item) or _RANGE.match(item)
    if m:
        lo, hi = int(m.group(1)), int(m.group(2))
        if hi < lo:
            raise UsageError(f"size item {item!r}: the range is empty (the end is below the start)")
        if m.re is _POW_RANGE:
            return [_check_size(2**k, item) for k in range(lo, hi + 1)]
        _check_size(lo, item)
        _check_size(hi, item)
        if hi - lo > 1_000_000:
            raise UsageError(f"size item {item!r}: a range of more than a million sizes is not supported")
        return list(range(lo, hi + 1))
    raise UsageError(
        f"size item {item!r} is not understood; use N, A..B, 2^A..2^B or a named set such as @default"
    )


def parse_sizes(text: str) -> list[int]:
    """Return the sorted, de-duplicated sizes that ``text`` names.

    Raises
    ------
    UsageError
        For an empty list, an empty item, a non-positive size, a reversed range or an
        unknown named set; the message names the offending item.

    Examples
    --------
    >>> parse_sizes("1..4,2^4..2^6,12")
    [1, 2, 3, 4, 12, 16, 32, 64]
    """
    if text is None or not text.strip():
        raise UsageError("the size list is empty; give sizes such as 1024 or 2^4..2^12 or @default")
    out: set[int] = set()
    for raw in text.split(","):
        item = raw.strip()
        if not item:
            raise UsageError(f"the size list {text!r} has an empty item; remove the extra comma")
        out.update(_parse_item(item))
    return sorted(out)
