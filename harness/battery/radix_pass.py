"""The combining pass of a mixed-radix FFT: is one wrong line of it the whole error?

For N = p m, the last pass of a decimation-in-time FFT (the first of a decimation-in-frequency
one, read backwards) combines the p sub-transforms S_r of size m of the decimated inputs
x[r], x[r + p], ... (r = 0..p-1):

    X[q + s m] = sum_r  w_p^(r s) * W_N^(r q) * S_r[q],   q = 0..m-1, s = 0..p-1,

with W_N = exp(-2j pi / N) and w_p = W_N^m (Cooley & Tukey, Math. Comp. 19 (1965) 297-301;
the mixed-radix form as in Oppenheim & Schafer, Discrete-Time Signal Processing, 3rd ed.,
sec. 9.5; the inverse has the opposite sign and its own scale, fitted below). The factor
W_N^(r q) is the *twiddle* of leg r, w_p^(r s) the p-point *butterfly*. :func:`pass_error`
rebuilds the S_r from the input (with the battery's reference) and tests three ways one line
of that pass goes wrong, each a model whose free values are fitted and whose residual must be
tiny (:data:`MATCH_RELATIVE`), the other legs left exactly right:

``leg-exponent``
    leg r is combined with W_N^(e k) over all k = q + s m, e != r (the exponent of another leg,
    0 for a missing twiddle, -r for a conjugated one);
``twiddle-table``
    leg r's twiddles W_N^(r q) are other values t(q) (a table built for another length, or a
    few wrong entries), its butterfly right;
``butterfly``
    the p x p butterfly matrix is another one (a constant such as sin(2 pi / 3) with too few
    digits), every twiddle right.

Runs only on a failed fft/ifft output (from :mod:`~fftgauge.harness.battery.diagnosis`).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Callable

import numpy as np

from fftgauge.harness.cases import Case

#: A model matches when its output is within this relative 2-norm of the backend's (and a
#: quarter of the error without it), as diagnosis.MATCH_RELATIVE for the structural hypotheses.
MATCH_RELATIVE = 1e-3
#: The radices tried: the small primes dividing N.
RADICES = (2, 3, 5, 7)
#: The sub-transforms must rebuild the exact transform to this relative 2-norm.
REBUILD_RELATIVE = 1e-9
#: A fitted twiddle or butterfly entry counts as wrong when it is this far from the right one.
ENTRY_WRONG = 1e-6
#: Entries listed in words.
SHOWN = 6

ReferenceFn = Callable[[np.ndarray, Case], Any]


@dataclass(frozen=True)
class PassError:
    """A wrong line of the combining pass: the ``model`` that matched (see the module
    docstring), the radix ``p``, the sub-transform size ``m``, the ``where`` (short) and
    ``likely`` (the line of code) words and the longer ``detail``."""

    model: str
    p: int
    m: int
    where: str
    likely: str
    detail: str


def _values(ref: Any) -> np.ndarray:
    return np.asarray(ref.values()).astype(np.complex128)


def legs(case: Case, x: np.ndarray, truth: np.ndarray, p: int,
         reference_fn: ReferenceFn) -> tuple[np.ndarray, np.ndarray, complex] | None:
    """Return ``(S, W, w)``: the p sub-transforms ``S`` (p x N, each S_r[k mod m], scaled so that
    sum_r W[r] S[r] is the exact transform), the factors ``W[r, k] = W_N^(r k)`` of the
    transform's sign, and the butterfly root w_p; None when they do not rebuild ``truth``."""
    n = case.n
    m = n // p
    sign = 1.0 if case.is_inverse else -1.0
    k = np.arange(n)
    sub_case = Case(case.kind, case.dtype, m, case.norm)
    s = np.array([_values(reference_fn(np.ascontiguousarray(x[r::p]), sub_case))[k % m] for r in range(p)])
    w = np.exp(sign * 2j * np.pi * np.outer(np.arange(p), k) / n)
    rebuilt = np.sum(w * s, axis=0)
    rr = np.vdot(rebuilt, rebuilt).real
    if not rr > 0:
        return None
    a = np.vdot(rebuilt, truth) / rr  # the inverse's 1/p (or a norm's) scale
    if np.linalg.norm(truth - a * rebuilt) > REBUILD_RELATIVE * np.linalg.norm(truth):
        return None
    return s * a, w, complex(np.exp(sign * 2j * np.pi / p))


def _matches(candidate: np.ndarray, y: np.ndarray, err: float) -> bool:
    residual = float(np.linalg.norm(y - candidate) / max(np.linalg.norm(candidate), 1e-300))
    return residual <= MATCH_RELATIVE and residual * 4 < err


def power(e: int, var: str) -> str:
    """Return ``e * var`` as an exponent is written: ``k``, ``-k``, ``2k``, ``0``."""
    return {0: "0", 1: var, -1: f"-{var}"}.get(e, f"{e}{var}")


def _signed(e: int, n: int) -> int:
    e %= n
    return e - n if e > n // 2 else e


def _exponent(c: np.ndarray, n: int, sign: float) -> int:
    """Return the integer e with c[k] ~ exp(sign 2j pi e k / n) (from the mean step of the phase)."""
    step = np.angle(np.sum(c[1:] * np.conj(c[:-1])))
    return int(round(step * n / (sign * 2 * np.pi))) % n


def _leg_exponent(case: Case, y: np.ndarray, s: np.ndarray, w: np.ndarray, wp: complex, p: int,
                  err: float) -> PassError | None:
    n, m = case.n, case.n // p
    sign = 1.0 if case.is_inverse else -1.0
    k = np.arange(n)
    for r in range(1, p):
        rest = np.sum(w * s, axis=0) - w[r] * s[r]
        usable = np.abs(s[r]) > 1e-3 * np.sqrt(np.mean(np.abs(s[r]) ** 2))
        if np.count_nonzero(usable) < n // 2:
            continue
        c = np.where(usable, (y - rest) / np.where(usable, s[r], 1), 0)
        e = _exponent(np.where(usable, c, np.exp(sign * 2j * np.pi * r * k / n)), n, sign)
        if e == r % n:
            continue
        candidate = rest + np.exp(sign * 2j * np.pi * e * k / n) * s[r]
        if not _matches(candidate, y, err):
            continue
        es = _signed(e, n)
        if es == 0:
            likely = f"leg {r}'s twiddle is missing (times 1)"
        elif es == -r:
            likely = f"leg {r}'s twiddle is conjugated (the exponent's sign)"
        elif 0 < es < p:
            likely = f"leg {r} takes leg {es}'s twiddle: index {power(es, 'k')} where {power(r, 'k')} is due"
        else:
            likely = f"leg {r}'s twiddle exponent is {power(es, 'k')} where {power(r, 'k')} is due"
        where = f"leg {r} of the radix-{p} pass: W_N^({power(es, 'k')}) for W_N^({power(r, 'k')})"
        detail = (f"the output is the transform with leg {r} of the radix-{p} pass that combines {p} sub-transforms "
                  f"of size {m} (inputs x[{r}], x[{r}+{p}], ...) multiplied by W_N^({power(es, 'k')}) in place of "
                  f"W_N^({power(r, 'k')}), "
                  f"every other leg right")
        return PassError("leg-exponent", p, m, where, likely, detail)
    return None


def _twiddle_table(case: Case, y: np.ndarray, s: np.ndarray, w: np.ndarray, wp: complex, p: int,
                   err: float) -> PassError | None:
    n, m = case.n, case.n // p
    sign = 1.0 if case.is_inverse else -1.0
    q = np.arange(m)
    for r in range(1, p):
        rest = np.sum(w * s, axis=0) - w[r] * s[r]
        sr = s[r].reshape(p, m)  # the same S_r[q] in each block s
        if np.any(np.abs(sr[0]) <= 1e-12 * np.max(np.abs(sr[0]))):
            continue
        fly = wp ** (r * np.arange(p))[:, None]
        t = np.mean((y - rest).reshape(p, m) / (fly * sr), axis=0)  # the twiddle each q got
        candidate = rest + (fly * t[None, :] * sr).reshape(-1)
        if not _matches(candidate, y, err):
            continue
        right = np.exp(sign * 2j * np.pi * r * q / n)
        wrong = np.flatnonzero(np.abs(t - right) > ENTRY_WRONG)
        if wrong.size == 0:
            continue
        e = _exponent(t, n, sign) if m >= 3 else r
        if wrong.size >= m - 1 and np.allclose(t, np.exp(sign * 2j * np.pi * e * q / n), atol=ENTRY_WRONG):
            es = _signed(e, n)
            if es == 0:
                likely = f"leg {r}'s twiddles are missing (all 1)"
            elif es == -r:
                likely = f"leg {r}'s twiddles are conjugated (the exponent's sign)"
            elif es % r == 0 and es // r > 1:
                likely = f"the twiddle table is built for N/{es // r} points, not N"
            else:
                likely = f"leg {r}'s twiddle index is {power(es, 'q')} where {power(r, 'q')} is due"
            where = f"all {m} twiddles of leg {r}, radix-{p} pass"
        else:
            shown = ", ".join(map(str, wrong[:SHOWN])) + (", ..." if wrong.size > SHOWN else "")
            likely = f"the twiddle table entries W_N^({power(r, 'q')}) at q = {shown}"
            where = f"{wrong.size} of {m} twiddles of leg {r} of the radix-{p} pass"
        detail = (f"the output is the transform with the twiddles W_N^({power(r, 'q')}) of leg {r} of the radix-{p} pass (which "
                  f"combines {p} sub-transforms of size {m}) replaced by other values at q = "
                  f"{', '.join(map(str, wrong[:SHOWN]))}{', ...' if wrong.size > SHOWN else ''}; its butterfly and "
                  f"the other legs right")
        return PassError("twiddle-table", p, m, where, likely, detail)
    return None


def _butterfly(case: Case, y: np.ndarray, s: np.ndarray, w: np.ndarray, wp: complex, p: int,
               err: float) -> PassError | None:
    n, m = case.n, case.n // p
    if m < 2 * p:
        return None  # too few equations per row for the p unknowns
    sign = 1.0 if case.is_inverse else -1.0
    q = np.arange(m)
    twiddled = np.array([np.exp(sign * 2j * np.pi * r * q / n) * s[r][:m] for r in range(p)]).T  # m x p
    rows = y.reshape(p, m)
    b = np.array([np.linalg.lstsq(twiddled, rows[row], rcond=None)[0] for row in range(p)])  # p x p
    candidate = (twiddled @ b.T).T.reshape(-1)
    if not _matches(candidate, y, err):
        return None
    right = wp ** np.outer(np.arange(p), np.arange(p))
    off = np.abs(b - right)
    if off.max() <= ENTRY_WRONG:
        return None
    entries = [(int(i), int(j)) for i, j in zip(*np.nonzero(off >= 0.1 * off.max()))]
    listed = ", ".join(f"({i},{j})" for i, j in entries[:SHOWN]) + (", ..." if len(entries) > SHOWN else "")
    size = float(off.max())
    if size < 1e-2:
        likely = f"a butterfly constant with too few digits (cos, sin of 2 pi/{p} off by {size:.2g})"
    else:
        likely = f"a wrong butterfly term (a sign or swapped constant, off by {size:.2g})"
    where = f"radix-{p} butterfly entries (row, leg) {listed}"
    detail = (f"the output is the transform whose radix-{p} butterfly (the {p} x {p} matrix w_{p}^(r s) applied to "
              f"the twiddled sub-transforms of size {m}) differs from the {p}-point DFT's in entries {listed} by up to "
              f"{size:.3g}; every twiddle right")
    return PassError("butterfly", p, m, where, likely, detail)


def pass_error(case: Case, x: np.ndarray, truth: np.ndarray, y: np.ndarray,
               reference_fn: ReferenceFn) -> PassError | None:
    """Return the wrong line of the combining pass that explains ``y`` (see the module
    docstring), trying the radices of :data:`RADICES` that divide N, or None.

    ``truth`` is the exact transform of ``x``; ``y`` the backend's output (both complex, of
    length N; fft and ifft only). Raises what ``reference_fn`` raises.
    """
    n = case.n
    if case.kind not in ("fft", "ifft") or n < 4:
        return None
    truth = np.asarray(truth, dtype=np.complex128)
    y = np.asarray(y, dtype=np.complex128)
    if not np.all(np.isfinite(y)):
        return None
    tn = float(np.linalg.norm(truth))
    if not tn > 0:
        return None
    err = float(np.linalg.norm(y - truth)) / tn
    for p in RADICES:
        if n % p or n // p < 2:
            continue
        found = legs(case, x, truth, p, reference_fn)
        if found is None:
            continue
        s, w, wp = found
        for model in (_leg_exponent, _twiddle_table, _butterfly):
            found_here = model(case, y, s, w, wp, p, err)
            if found_here is not None:
                return found_here
    return None
