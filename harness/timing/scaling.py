"""Scaling analysis of timing rows: fitted growth exponents and sizes that cost far more than
their neighbours, explained in plain words.

Per backend x kind x precision, over the power-of-two sizes of at least :data:`FIT_MIN_N`,
two straight lines are fitted by least squares in log-log space:

- ``log(seconds)`` against ``log(N log2 N)``: the exponent is about 1 for an O(N log N) FFT;
- ``log(seconds)`` against ``log(N)``: the exponent is about 1 (slightly above) for an FFT
  and about 2 for the direct DFT.

The second fit is the one to read for "is this quadratic?". A time exactly proportional to
N^2, fitted against N log2 N, does not give 2: the ratio of the logarithms is
log(N^2) / log(N log N) = 2 log N / (log N + log log N), and the slope the fit measures is
the local one, d log(N^2) / d log(N log2 N) = 2 ln N / (ln N + 1) (with u = ln N,
log(N log2 N) = u + ln u - ln ln 2, whose derivative in u is 1 + 1/u), which runs from
about 1.61 at 2^6 to 1.87 at 2^20. The first fit alone would therefore understate a direct
DFT; the test suite checks this slope numerically.

Outliers (:func:`find_outliers`): a size of at least :data:`FIT_MIN_N` whose ``ns_per_nlogn``
(nanoseconds per N log2 N) is more than :data:`OUTLIER_FACTOR` times the typical value for
that size in its backend x kind x precision is flagged. The typical value is read from the
powers of two, the sizes every FFT library handles best:

- for a size that is not a power of two: the ns_per_nlogn of the powers of two around it,
  interpolated linearly in log-log space (the nearest one beyond the ends of the range);
- for a power of two: the smallest ns_per_nlogn of the smaller powers of two, so that a
  step up as the working set leaves a cache stands out;
- for a group with fewer than two powers of two: the group's median ns_per_nlogn.

Comparing with neighbouring sizes rather than with one median over all sizes matters at
small sizes: there the fixed cost of a call dominates, every size looks slow per N log2 N,
and a single median would flag them all. Sizes below :data:`FIT_MIN_N` are never flagged.
The likely cause is named in this order: a prime size (Bluestein's or Rader's algorithm,
or an O(N^2) fallback), a size with a large prime factor (not 7-smooth), a working set
beyond the L2 or a larger cache of the results' machine (a cache cliff), else no known cause.
"""

from __future__ import annotations

import dataclasses
import math
import re
from typing import Any, Iterable, Mapping

import numpy as np
from scipy import stats

from fftgauge.harness.cases import Case, is_power_of_two
from fftgauge.harness.dft import size_label
from fftgauge.harness.sizes import is_prime
from fftgauge.harness.timing import opcount

#: Smallest size used in the fits and in the outlier rule: below it the fixed cost of a call
#: dominates the time (common practice).
FIT_MIN_N = 64

#: A size is flagged when its ns_per_nlogn exceeds this many times its group's median.
OUTLIER_FACTOR = 3.0

#: Largest prime factor of a size the outlier rule still calls smooth (2, 3, 5, 7: the
#: radices FFT libraries have special code for; common practice).
SMOOTH_LIMIT = 7

#: How the fitted exponent against N is read (see :func:`growth_words`).
QUADRATIC_EXPONENT = 1.7
NLOGN_EXPONENT_MAX = 1.25
OVERHEAD_EXPONENT = 0.9

_CACHE_SIZE = re.compile(r"^\s*([0-9]+(?:\.[0-9]+)?)\s*([KMG]?)(?:i?B)?\s*$", re.IGNORECASE)
_CACHE_MULTIPLIER = {"": 1, "K": 1024, "M": 1024**2, "G": 1024**3}


def _row_dict(row: Any) -> dict[str, Any]:
    """Return a time row (a dict or a :class:`fftgauge.harness.rows.TimeRow`) as a dict."""
    return dataclasses.asdict(row) if dataclasses.is_dataclass(row) else dict(row)


def _usable(row: Mapping[str, Any]) -> bool:
    """True for a row that holds a measured, positive median time."""
    seconds = row.get("seconds")
    return row.get("status", "ok") == "ok" and seconds is not None and seconds > 0 and row.get("n", 0) >= 1


def ns_per_nlogn(row: Mapping[str, Any]) -> float | None:
    """Return the row's nanoseconds per N log2 N: its own field, else
    :func:`fftgauge.harness.timing.opcount.ns_per_nlogn` of its median time.

    Returns None for n = 1 (N log2 N is 0) or a row without a usable time.
    """
    value = row.get("ns_per_nlogn")
    if value is not None:
        return float(value)
    if not _usable(row) or row["n"] < 2:
        return None
    return opcount.ns_per_nlogn(row["seconds"], row["n"])


def _groups(rows: Iterable[Any]) -> dict[tuple[str, str, str], list[dict[str, Any]]]:
    """Return the usable rows grouped by (backend, kind, dtype), each group sorted by n."""
    out: dict[tuple[str, str, str], list[dict[str, Any]]] = {}
    for raw in rows:
        row = _row_dict(raw)
        if _usable(row):
            out.setdefault((row["backend"], row["kind"], row["dtype"]), []).append(row)
    for group in out.values():
        group.sort(key=lambda r: r["n"])
    return out


def _loglog_fit(x: np.ndarray, seconds: np.ndarray) -> tuple[float, float | None]:
    """Return the least-squares slope of log(seconds) on log(x) and its standard error.

    The standard error is None with fewer than three points (a line through two points has
    no residual to estimate it from). Source: ordinary least squares, via
    :func:`scipy.stats.linregress`.
    """
    fit = stats.linregress(np.log(x), np.log(seconds))
    stderr = float(fit.stderr) if len(x) >= 3 else None
    return float(fit.slope), stderr


def growth_words(exponent_n: float | None) -> str:
    """Return how a fitted exponent against N reads: O(N log N), faster growth, or O(N^2).

    The rule: at least :data:`QUADRATIC_EXPONENT` reads as quadratic (a direct DFT); below
    :data:`OVERHEAD_EXPONENT` as a fixed per-call cost still dominating; up to
    :data:`NLOGN_EXPONENT_MAX` as N log N (log2 N adds about 0.1 to the exponent of N over
    2^6 .. 2^20); anything between as growth faster than N log N.
    """
    if exponent_n is None:
        return "too few power-of-two sizes to fit"
    if exponent_n >= QUADRATIC_EXPONENT:
        return "grows like N^2: a direct DFT or an O(N^2) path"
    if exponent_n < OVERHEAD_EXPONENT:
        return ("grows slower than N: the fixed cost of a call still dominates part of the range "
                "(time larger sizes for the algorithm's growth)")
    if exponent_n <= NLOGN_EXPONENT_MAX:
        return "consistent with O(N log N)"
    return "grows faster than N log N: cache or memory effects, or an O(N^2) part"


def fit_scaling(rows: Iterable[Any], min_n: int = FIT_MIN_N) -> list[dict[str, Any]]:
    """Return one fit per backend x kind x dtype over its power-of-two sizes >= ``min_n``.

    Parameters
    ----------
    rows
        Time rows (dicts of the ``fftgauge-time/1`` schema or :class:`fftgauge.harness.rows.TimeRow`);
        rows without a usable time (status other than ``ok``, no or non-positive seconds)
        are ignored.
    min_n
        Smallest size used in the fit (default :data:`FIT_MIN_N`).

    Returns
    -------
    list of dict
        Sorted by (backend, kind, dtype), each with ``backend``, ``kind``, ``dtype``,
        ``points`` (sizes used), ``n_min``, ``n_max``, ``exponent_nlogn`` and
        ``exponent_nlogn_stderr`` (slope of log seconds on log(N log2 N)), ``exponent_n``
        and ``exponent_n_stderr`` (slope on log N), and ``words`` (:func:`growth_words`).
        Exponents are None with fewer than two sizes, standard errors with fewer than three.
    """
    out = []
    for (backend, kind, dtype), group in sorted(_groups(rows).items()):
        pts = [r for r in group if r["n"] >= max(min_n, 2) and is_power_of_two(r["n"])]
        fit: dict[str, Any] = {"backend": backend, "kind": kind, "dtype": dtype, "points": len(pts),
                               "n_min": pts[0]["n"] if pts else None, "n_max": pts[-1]["n"] if pts else None,
                               "exponent_nlogn": None, "exponent_nlogn_stderr": None,
                               "exponent_n": None, "exponent_n_stderr": None}
        if len(pts) >= 2:
            n = np.array([r["n"] for r in pts], dtype=float)
            seconds = np.array([r["seconds"] for r in pts], dtype=float)
            work = np.array([opcount.nlogn(r["n"]) for r in pts], dtype=float)
            fit["exponent_nlogn"], fit["exponent_nlogn_stderr"] = _loglog_fit(work, seconds)
            fit["exponent_n"], fit["exponent_n_stderr"] = _loglog_fit(n, seconds)
        fit["words"] = growth_words(fit["exponent_n"])
        out.append(fit)
    return out


def parse_cache_bytes(text: Any) -> int | None:
    """Return a cache size such as ``"32K"``, ``"1024K"``, ``"8M"``, ``"1 MiB"`` or an int in bytes.

    Returns None for a value it cannot read (the caller then says the size is unknown).
    K, M, G are binary multiples, as Linux sysfs reports cache sizes.
    """
    if isinstance(text, (int, float)) and not isinstance(text, bool):
        return int(text) if text > 0 else None
    if not isinstance(text, str):
        return None
    m = _CACHE_SIZE.match(text)
    if not m:
        return None
    return int(float(m.group(1)) * _CACHE_MULTIPLIER[m.group(2).upper()])


def data_caches(machine: Mapping[str, Any] | None) -> list[tuple[str, int]]:
    """Return the data (or unified) caches of a machine fingerprint as (name, bytes), smallest first.

    Instruction caches (``L1i``) are left out: a transform's data does not live there.
    """
    caches = (machine or {}).get("caches") or {}
    out = []
    for name, size in caches.items():
        if str(name).lower().endswith("i"):
            continue
        size_bytes = parse_cache_bytes(size)
        if size_bytes:
            out.append((str(name), size_bytes))
    return sorted(out, key=lambda item: item[1])


def working_set_bytes(kind: str, dtype: str, n: int) -> int:
    """Return the bytes of one transform's input plus output: 2 n x (complex item size) for fft.

    For rfft/irfft the real side holds n real values and the complex side n/2 + 1 complex
    values, about the same bytes as one complex array. Item sizes are this platform's numpy
    ones (``longdouble`` differs between platforms).
    """
    case = Case(kind, dtype, n)
    return case.input_length * case.input_dtype.itemsize + case.output_length * case.output_dtype.itemsize


def largest_prime_factor(n: int) -> int:
    """Return the largest prime factor of ``n`` (1 for n = 1), by trial division."""
    largest, f = 1, 2
    while f * f <= n:
        while n % f == 0:
            largest, n = f, n // f
        f += 1 if f == 2 else 2
    return max(largest, n) if n > 1 else largest


def format_bytes(size_bytes: float) -> str:
    """Return a byte count as text with a binary unit: ``512 B``, ``32 KiB``, ``1.5 MiB``."""
    for unit, scale in (("GiB", 1024**3), ("MiB", 1024**2), ("KiB", 1024)):
        if size_bytes >= scale:
            return f"{size_bytes / scale:.3g} {unit}"
    return f"{int(size_bytes)} B"


def size_text(n: int) -> str:
    """Return ``n`` as a reader sees it: ``2^20`` for a power of two >= 2, else the number."""
    return size_label(n)


def likely_cause(row: Mapping[str, Any], ratio: float, machine: Mapping[str, Any] | None) -> tuple[str, str]:
    """Return (cause code, message) for a size that costs ``ratio`` times its group's typical value.

    Cause codes: ``prime``, ``non-smooth``, ``cache-cliff``, ``unknown``; the message is a
    plain-words sentence such as "n = 9973 (prime) costs 14x the typical time per N log2 N:
    probably a Bluestein or O(N^2) path".
    """
    n = row["n"]
    head = f"{row['backend']} {row['kind']} {row['dtype']}: n = {size_text(n)}"
    costs = f"costs {ratio:.3g}x the typical time per N log2 N"
    if is_prime(n):
        return "prime", f"{head} (prime) {costs}: probably a Bluestein or O(N^2) path"
    factor = largest_prime_factor(n)
    if factor > SMOOTH_LIMIT:
        return ("non-smooth", f"{head} (largest prime factor {factor}) {costs}: probably a Bluestein or "
                              f"O(N^2) path for the factor {factor}")
    ws = working_set_bytes(row["kind"], row["dtype"], n)
    caches = data_caches(machine)
    beyond = [(name, size) for name, size in caches if ws > size and not name.upper().startswith("L1")]
    if beyond:
        name, size = beyond[-1]
        return ("cache-cliff", f"{head} {costs}: probably a cache cliff: its working set of {format_bytes(ws)} "
                               f"(input and output) exceeds the {format_bytes(size)} {name} cache")
    if not caches:
        return ("unknown", f"{head} {costs}: the size is smooth and the results hold no cache sizes; a working "
                           f"set of {format_bytes(ws)} beyond the last-level cache would make it a cache cliff")
    holds = [name for name, size in caches if ws <= size and not name.upper().startswith("L1")]
    where = f"the {holds[0]} cache" if holds else "cache"
    if is_power_of_two(n):
        return ("unknown", f"{head} {costs}: a power of two whose {format_bytes(ws)} working set fits in {where}, "
                           f"so not a cache effect: the implementation's cost grows faster than N log N here, or "
                           f"the run was disturbed (rerun to rule out another process or frequency scaling)")
    return ("unknown", f"{head} {costs}: the size is 7-smooth and its {format_bytes(ws)} working set fits in "
                       f"{where}: the library may lack a fast path for its factors, or the run was disturbed "
                       f"(rerun to rule out another process or frequency scaling)")


#: A group whose time grows at least like N^this (fitted against N) is an O(N^2) backend
#: (a direct DFT): its sizes are not flagged one by one against an N log N yardstick.
QUADRATIC_EXPONENT_N = 1.6


def _typical_values(group: list[dict[str, Any]], min_n: int) -> list[tuple[dict[str, Any], float, float, str]]:
    """Return (row, ns_per_nlogn, typical ns_per_nlogn, basis) for the group's sizes >= ``min_n``.

    ``basis`` says where the typical value came from (see the module docstring).
    """
    valued = [(r, ns_per_nlogn(r)) for r in group if r["n"] >= 2]
    valued = [(r, v) for r, v in valued if v is not None and v > 0]
    pow2 = [(r["n"], v) for r, v in valued if is_power_of_two(r["n"])]
    candidates = [(r, v) for r, v in valued if r["n"] >= min_n]
    out = []
    if len(pow2) < 2:
        if len(candidates) >= 3:
            median = float(np.median([v for _, v in candidates]))
            out = [(r, v, median, "the median of its sizes") for r, v in candidates]
        return out
    log_n = np.log([n for n, _ in pow2])
    log_v = np.log([v for _, v in pow2])
    for row, value in candidates:
        n = row["n"]
        if is_power_of_two(n):
            smaller = [v for m, v in pow2 if m < n]
            if smaller:
                out.append((row, value, min(smaller), "the best of the smaller powers of two"))
        else:
            typical = float(np.exp(np.interp(math.log(n), log_n, log_v)))
            out.append((row, value, typical, "the powers of two around it"))
    return out


def find_outliers(rows: Iterable[Any], machine: Mapping[str, Any] | None = None,
                  factor: float = OUTLIER_FACTOR, min_n: int = FIT_MIN_N) -> list[dict[str, Any]]:
    """Return the sizes whose ns_per_nlogn is more than ``factor`` x the typical value for them.

    The typical value comes from the powers of two of the same backend, kind and precision
    (the rule is in the module docstring).

    Parameters
    ----------
    rows
        Time rows (dicts or :class:`fftgauge.harness.rows.TimeRow`).
    machine
        The results' machine fingerprint; its ``caches`` (e.g. ``{"L1d": "32K", "L2":
        "1024K", "L3": "32768K"}``) decide whether a size is beyond a cache.
    factor
        Flagging threshold (default :data:`OUTLIER_FACTOR`).
    min_n
        Sizes below this are never flagged (default :data:`FIT_MIN_N`).

    Returns
    -------
    list of dict
        One per flagged size, worst first: ``backend``, ``kind``, ``dtype``, ``n``,
        ``ns_per_nlogn``, ``typical_ns_per_nlogn``, ``typical_from`` (words), ``ratio``,
        ``cause`` (see :func:`likely_cause`), ``working_set_bytes`` and ``message``.
    """
    rows = list(rows)
    quadratic = {(f["backend"], f["kind"], f["dtype"]) for f in fit_scaling(rows, min_n)
                 if f["exponent_n"] is not None and f["exponent_n"] >= QUADRATIC_EXPONENT_N}
    out = []
    for key, group in _groups(rows).items():
        if key in quadratic:  # the whole group grows like N^2: its fit line already says so
            continue
        for row, value, typical, basis in _typical_values(group, min_n):
            ratio = value / typical
            if ratio > factor:
                cause, message = likely_cause(row, ratio, machine)
                out.append({"backend": row["backend"], "kind": row["kind"], "dtype": row["dtype"], "n": row["n"],
                            "ns_per_nlogn": value, "typical_ns_per_nlogn": typical, "typical_from": basis,
                            "ratio": ratio, "cause": cause,
                            "working_set_bytes": working_set_bytes(row["kind"], row["dtype"], row["n"]),
                            "message": message})
    return sorted(out, key=lambda o: -o["ratio"])


def _fit_line(fit: Mapping[str, Any], min_n: int) -> str:
    """Return one report line for one fit."""
    label = f"{fit['backend']} {fit['kind']} {fit['dtype']}"
    if fit["exponent_n"] is None:
        return f"  {label}: {fit['words']} (>= {min_n}; {fit['points']} found)"

    def with_error(value: float, stderr: float | None) -> str:
        return f"{value:.3f}" + (f" +/- {stderr:.3f}" if stderr is not None else "")

    return (f"  {label}: seconds ~ (N log2 N)^{with_error(fit['exponent_nlogn'], fit['exponent_nlogn_stderr'])}, "
            f"~ N^{with_error(fit['exponent_n'], fit['exponent_n_stderr'])} over {size_text(fit['n_min'])}.."
            f"{size_text(fit['n_max'])} ({fit['points']} sizes): {fit['words']}")


def scaling_report(rows: Iterable[Any], machine: Mapping[str, Any] | None = None, min_n: int = FIT_MIN_N) -> str:
    """Return the scaling analysis as plain text: one fit line per group, then the flagged sizes.

    Parameters
    ----------
    rows
        Time rows (dicts or :class:`fftgauge.harness.rows.TimeRow`).
    machine
        The results' machine fingerprint (for the cache-cliff rule).
    min_n
        Smallest size fitted and flagged (default :data:`FIT_MIN_N`).
    """
    rows = list(rows)
    fits = fit_scaling(rows, min_n)
    if not fits:
        return "scaling: no timed rows to analyse"
    lines = [f"scaling (least squares in log-log space over powers of two >= {min_n}; "
             f"exponent about 1 against N log2 N for an FFT, about 2 against N for a direct DFT):"]
    lines += [_fit_line(fit, min_n) for fit in fits]
    outliers = find_outliers(rows, machine, min_n=min_n)
    rule = (f"more than {OUTLIER_FACTOR:g}x the ns per N log2 N of the same backend's powers of two around "
            f"them, sizes >= {min_n}")
    if outliers:
        lines += ["", f"sizes far above their backend's typical cost ({rule}):"]
        lines += [f"  {o['message']}" for o in outliers]
    else:
        lines += ["", f"no size costs {rule}"]
    return "\n".join(lines)
