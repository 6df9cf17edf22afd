"""Known DFT pairs: structured signals whose transform has a closed form.

Each :class:`Pair` gives, for a length ``n``, a signal ``x`` and its *unnormalised forward*
DFT ``X[k] = sum_j x[j] exp(-2j pi k j / n)`` evaluated from the closed formula (never by an
FFT), with every integer product reduced modulo ``n`` (or ``2n``) before it becomes an angle.
The sources are those of the project's check-value list.

How a check uses a pair
-----------------------
1. ``x = pair.signal(n)`` (complex128), rounded to the case's precision, through the forward
   ``fft`` with ``norm="backward"`` (for ``rfft`` and a pair with ``real=True``: the real
   part through ``rfft``, compared on the first ``n // 2 + 1`` bins). Inverse kinds can use a
   pair through ``conj``: ``ifft(conj(x)) * n = conj(X)`` under ``backward``.
2. ``pair_error(pair, n, y)`` measures the output ``y`` against the closed form, according to
   ``pair.compare``:

   - ``"full"``: the whole spectrum, ``norm2(y - X)``;
   - ``"magnitude"``: only ``|y|`` against ``|X|`` (Zadoff-Chu: flat magnitude sqrt(n));
   - ``"bin0"``: only ``y[0]`` against ``X[0]`` (the Gauss sum: the sum of the chirp, which is
     the k = 0 output of either sign of transform, so a forward ``fft`` gives it; the other
     entries of ``transform(n)`` are NaN so that using them by mistake shows);

   always divided by ``sqrt(n) norm2(x)``, which is ``norm2(X)`` by Parseval. Each of the
   three is at most the relative 2-norm error of the transform, so the ``accuracy`` limit
   applies, plus :func:`closed_form_allowance` for rounding the signal to the case's precision
   and for evaluating the closed form in double.

What a pair can reveal: even signals (``x[-j] = x[j]``: impulse, constant, cosine, chirp,
periodic-gaussian, and the gauss-sum bin) have the same transform under either exponent
sign, so they cannot show a sign error; shifted-impulse, complex-tone, rect-dirichlet and
geometric can. The magnitude-only Zadoff-Chu comparison shows neither sign nor shift errors.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass
from typing import Callable

import numpy as np

from fftgauge.harness.battery import inputs
from fftgauge.harness.battery.bounds import unit_roundoff
from fftgauge.harness.sizes import is_prime

SOURCE_OS_CH8 = "Oppenheim & Schafer, 3rd ed., ch. 8 (from memory)"
SOURCE_GEOMETRIC = "geometric series; common practice"
SOURCE_ZADOFF_CHU = ("3GPP TS 36.211, section 5.7.2 (sequence definition); Chu, IEEE Trans. Inf. Theory 18(4) "
                     "(1972) 531-532 (constant-amplitude property)")
SOURCE_GAUSS = "Gauss; Berndt, Evans & Williams, Gauss and Jacobi Sums, Wiley 1998 (from memory)"
SOURCE_THETA = "Poisson summation / Jacobi theta identity (from memory; verify numerically)"

COMPARES = ("full", "magnitude", "bin0")

#: The closed forms below, evaluated in double, and the float64 signals match the exact DFT
#: of the stored signal to within this many units of 2^-53 (relative, normwise); the tests
#: measure it against a 50-digit direct DFT.
CLOSED_FORM_UNITS = 16.0


@dataclass(frozen=True)
class Pair:
    """A signal with a closed-form DFT.

    Attributes
    ----------
    name : short name (``impulse``, ``zadoff-chu``, ...).
    source : where the pair comes from, as the check-value list names it.
    applies : which lengths ``n`` the pair is defined for.
    signal : ``n -> x``, complex128 of length n.
    transform : ``n -> X``, the closed-form unnormalised forward DFT (complex128, length n).
    compare : ``"full"``, ``"magnitude"`` or ``"bin0"``, see the module docstring.
    real : True when the signal is real (usable through ``rfft``).
    """

    name: str
    source: str
    applies: Callable[[int], bool]
    signal: Callable[[int], np.ndarray]
    transform: Callable[[int], np.ndarray]
    compare: str = "full"
    real: bool = False


def pair_error(pair: Pair, n: int, y: np.ndarray) -> float:
    """Return the error of a forward-DFT output ``y`` of ``pair.signal(n)``, relative to norm2(X).

    ``y`` holds ``n`` bins (or, for a real pair through ``rfft``, the first ``n // 2 + 1``:
    those are compared). The divisor is always norm2(X) of the full spectrum, so the value is
    at most the relative 2-norm error of the transform (full or half spectrum alike). See the module docstring for what
    each ``compare`` mode measures.

    Raises
    ------
    ValueError
        When ``pair`` does not apply to ``n`` or ``y`` has neither length.
    """
    if not pair.applies(n):
        raise ValueError(f"the pair {pair.name!r} is not defined for n = {n}")
    y = np.asarray(y).astype(np.complex128)
    if y.shape not in ((n,), (n // 2 + 1,)):
        raise ValueError(f"pair output must have length {n} or {n // 2 + 1}, got shape {y.shape}")
    expected = pair.transform(n)[: y.shape[0]]
    x = pair.signal(n)
    scale = math.sqrt(n) * float(np.linalg.norm(x))  # norm2(X), Parseval
    if pair.compare == "full":
        err = float(np.linalg.norm(y - expected))
    elif pair.compare == "magnitude":
        err = float(np.linalg.norm(np.abs(y) - np.abs(expected)))
    else:
        err = float(abs(y[0] - expected[0]))
    return err / scale if scale > 0 else err


def closed_form_allowance(dtype: str) -> float:
    """Return what :func:`pair_error` may exceed the transform's own error by, in a precision.

    ``2 u(dtype)`` for rounding the float64 signal to the case's precision (each entry changes
    by at most u relative, so the DFT changes by at most u norm2(X)), plus
    ``CLOSED_FORM_UNITS * 2^-53`` for the closed form's evaluation in double.

    Raises
    ------
    ValueError
        For an unknown precision.
    """
    return 2.0 * unit_roundoff(dtype) + CLOSED_FORM_UNITS * 2.0**-53


# -- the closed forms ----------------------------------------------------------------------

def _k(n: int) -> np.ndarray:
    return np.arange(n, dtype=np.int64)


def _shift(n: int) -> int:
    """The shift of the shifted impulse: a third of the way round (1 for n = 2, 0 for n = 1)."""
    return max(1, n // 3) % n


def _shifted_impulse_dft(n: int) -> np.ndarray:
    """delta[j - m] -> exp(-2j pi k m / n)."""
    return inputs.root_of_unity(-((_k(n) * _shift(n)) % n), n)


def _constant_dft(n: int) -> np.ndarray:
    """1 -> n delta[k]."""
    out = np.zeros(n, dtype=np.complex128)
    out[0] = n
    return out


def _tone_bin(n: int) -> int:
    return (n // 4 + 1) % n


def _tone_dft(n: int) -> np.ndarray:
    """exp(2j pi k0 j / n) -> n delta[k - k0]."""
    out = np.zeros(n, dtype=np.complex128)
    out[_tone_bin(n)] = n
    return out


def _cosine_bin(n: int) -> int:
    return (n // 5 + 1) % n


def _cosine_dft(n: int) -> np.ndarray:
    """cos(2 pi k0 j / n) -> (n / 2) (delta[k - k0] + delta[k + k0]) (linearity of the tone pair)."""
    k0 = _cosine_bin(n)
    out = np.zeros(n, dtype=np.complex128)
    out[k0] += n / 2
    out[(-k0) % n] += n / 2
    return out


def _rect_length(n: int) -> int:
    """Pulse length: a third of n rounded up (so n = 1 gives the whole signal, the L = n limit)."""
    return (n + 2) // 3


def dirichlet_dft(n: int, length: int) -> np.ndarray:
    """Return the DFT of the rectangular pulse of ``length``: exp(-j pi k (L-1)/n) sin(pi k L/n) / sin(pi k/n).

    The three angles are ``2 pi (integer mod 2n) / (2n)``; k = 0 gives L (the limit), and where
    ``sin(pi k L / n) = 0`` (L = n) the exactly zero numerator gives exactly 0.
    Source: Oppenheim & Schafer, 3rd ed., ch. 8 (from memory).
    """
    k = _k(n)
    two_n = 2 * n
    phase = inputs.root_of_unity(-((k * (length - 1)) % two_n), two_n)
    numerator = inputs.root_of_unity((k * length) % two_n, two_n).imag
    denominator = inputs.root_of_unity(k, two_n).imag
    ratio = np.empty(n)
    ratio[0] = length
    ratio[1:] = numerator[1:] / denominator[1:]
    return phase * ratio


#: Ratio of the geometric pair: 0.9 exp(2j pi / 7), a complex ratio well inside the unit circle.
GEOMETRIC_RATIO = complex(0.9 * inputs.root_of_unity(1, 7))


def geometric_dft(n: int, a: complex) -> np.ndarray:
    """Return the DFT of a^j, j < n: (1 - a^n) / (1 - a exp(-2j pi k / n)) (``a^n != 1`` and ``|a| != 1``).

    Source: geometric series; common practice.
    """
    a_n = inputs.integer_powers(a, n + 1)[-1]
    return (1.0 - a_n) / (1.0 - a * inputs.root_of_unity(-_k(n), n))


def zadoff_chu_root(n: int) -> int:
    """The root index u used for length ``n``: 1 + n // 3 (any 0 < u < n keeps the flat magnitude)."""
    return 1 + n // 3


def _is_odd_prime(n: int) -> bool:
    return n % 2 == 1 and is_prime(n)


def gauss_sum(n: int) -> complex:
    """Return the quadratic Gauss sum G(n) = sum_j exp(2j pi j^2 / n).

    sqrt(n) for n = 1 mod 4, 0 for n = 2 mod 4, j sqrt(n) for n = 3 mod 4, (1 + j) sqrt(n) for
    n = 0 mod 4. Source: Gauss; Berndt, Evans & Williams, Gauss and Jacobi Sums, Wiley 1998
    (from memory).
    """
    root = math.sqrt(n)
    return {1: complex(root, 0.0), 2: 0j, 3: complex(0.0, root), 0: complex(root, root)}[n % 4]


def _gauss_sum_transform(n: int) -> np.ndarray:
    out = np.full(n, np.nan + 1j * np.nan, dtype=np.complex128)
    out[0] = gauss_sum(n)
    return out


def chirp_dft(n: int) -> np.ndarray:
    """Return the DFT of the chirp exp(2j pi j^2 / n) for odd n: G(n) exp(-2j pi k^2 4^-1 / n).

    Completing the square modulo odd n, j^2 - k j = (j - 2^-1 k)^2 - 4^-1 k^2 (2^-1 and 4^-1 the
    inverses modulo n), and a shift does not change a sum over all residues, so each bin is
    the Gauss sum times a root of unity. Source: Gauss; Berndt, Evans & Williams, Gauss and
    Jacobi Sums, Wiley 1998 (from memory), with the completion of the square (verified
    numerically in the tests).
    """
    inv4 = pow(4, -1, n) if n > 1 else 0
    k = _k(n)
    return gauss_sum(n) * inputs.root_of_unity(-((((k * k) % n) * inv4) % n), n)


def _always(n: int) -> bool:
    return n >= 1


PAIRS: tuple[Pair, ...] = (
    Pair("impulse", SOURCE_OS_CH8, _always,
         lambda n: inputs.impulse(n).astype(np.complex128),
         lambda n: np.ones(n, dtype=np.complex128), real=True),
    Pair("shifted-impulse", SOURCE_OS_CH8, _always,
         lambda n: inputs.impulse(n, _shift(n)).astype(np.complex128),
         _shifted_impulse_dft, real=True),
    Pair("constant", SOURCE_OS_CH8, _always,
         lambda n: inputs.constant(n).astype(np.complex128),
         _constant_dft, real=True),
    Pair("complex-tone", SOURCE_OS_CH8, _always,
         lambda n: inputs.complex_tone(n, _tone_bin(n)),
         _tone_dft),
    Pair("cosine", SOURCE_OS_CH8, _always,
         lambda n: inputs.cosine(n, _cosine_bin(n)).astype(np.complex128),
         _cosine_dft, real=True),
    Pair("rect-dirichlet", SOURCE_OS_CH8, _always,
         lambda n: inputs.rect(n, _rect_length(n)).astype(np.complex128),
         lambda n: dirichlet_dft(n, _rect_length(n)), real=True),
    Pair("geometric", SOURCE_GEOMETRIC, _always,
         lambda n: inputs.geometric(n, GEOMETRIC_RATIO).astype(np.complex128),
         lambda n: geometric_dft(n, GEOMETRIC_RATIO)),
    Pair("zadoff-chu", SOURCE_ZADOFF_CHU, _is_odd_prime,
         lambda n: inputs.zadoff_chu(n, zadoff_chu_root(n)),
         lambda n: np.full(n, math.sqrt(n), dtype=np.complex128), compare="magnitude"),
    Pair("gauss-sum", SOURCE_GAUSS, _always,
         inputs.chirp,
         _gauss_sum_transform, compare="bin0"),
    Pair("chirp", SOURCE_GAUSS, lambda n: n >= 1 and n % 2 == 1,
         inputs.chirp,
         chirp_dft),
    Pair("periodic-gaussian", SOURCE_THETA, _always,
         lambda n: inputs.periodic_gaussian(n).astype(np.complex128),
         lambda n: math.sqrt(n) * inputs.periodic_gaussian(n).astype(np.complex128), real=True),
)


@functools.lru_cache(maxsize=64)
def pair_values(pair: Pair, n: int) -> tuple[np.ndarray, np.ndarray]:
    """Return ``(pair.signal(n), pair.transform(n))`` as read-only complex128 arrays.

    Computed once per pair and length in a process and shared by every case of that length
    (four kinds, each precision and normalisation: the closed forms do not depend on them).
    """
    signal = np.array(pair.signal(n), dtype=np.complex128)
    transform = np.array(pair.transform(n), dtype=np.complex128)
    signal.flags.writeable = False
    transform.flags.writeable = False
    return signal, transform


def pair_named(name: str) -> Pair:
    """Return the pair called ``name``.

    Raises
    ------
    KeyError
        When no pair has that name (the message lists the names).
    """
    for p in PAIRS:
        if p.name == name:
            return p
    raise KeyError(f"no transform pair named {name!r}; known: {', '.join(p.name for p in PAIRS)}")
